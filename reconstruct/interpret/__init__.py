"""Interpretation of a velocity cube: background and detection threshold,
connected bodies (the void table), and screening of the bodies against
planned works.
"""

from reconstruct.interpret.bodies import (
    VoidOptions,
    VoidBody,
    VoidAnalysis,
    find_voids,
    void_table_rows,
)
from reconstruct.interpret.screening import ScreeningOptions, ScreeningEntry, screen_voids
from reconstruct.interpret.folder import InversionFolder, load_inversion_folder, screen_folder

__all__ = [
    "VoidOptions",
    "VoidBody",
    "VoidAnalysis",
    "find_voids",
    "void_table_rows",
    "ScreeningOptions",
    "ScreeningEntry",
    "screen_voids",
    "InversionFolder",
    "load_inversion_folder",
    "screen_folder",
]
