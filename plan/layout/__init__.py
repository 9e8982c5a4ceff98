"""Node layouts: candidate positions on the surface, bench faces and in holes,
a layout within a node budget, and the optimiser that improves it.
"""

from plan.layout.layouts import (
    LayoutOptions,
    Layout,
    candidate_positions,
    design_layout,
    write_layout_csv,
)
from plan.layout.optimise import OptimiseOptions, OptimisationResult, optimise_layout

__all__ = [
    "LayoutOptions",
    "Layout",
    "candidate_positions",
    "design_layout",
    "write_layout_csv",
    "OptimiseOptions",
    "OptimisationResult",
    "optimise_layout",
]
