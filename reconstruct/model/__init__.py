"""The model: the voxel grid, the ground surface in it, where nodes sit, physical
constants, rock properties (Topp petrophysics) and the resolution floor.

The lowest layer of ``reconstruct``: it imports nothing above it.
"""

from reconstruct.model.constants import SPEED_OF_LIGHT_M_PER_NS, AIR_VELOCITY_M_PER_NS
from reconstruct.model.grid import Grid, ground_mask, ground_top_m, check_grid_fits_memory
from reconstruct.model.placement import NodePlacement, place_nodes
from reconstruct.model.petrophysics import (
    relative_permittivity,
    velocity_from_permittivity,
    water_content_topp,
    permittivity_topp,
    petrophysics_arrays,
)
from reconstruct.model.resolution import wavelength_m, fresnel_half_width_m

__all__ = [
    "SPEED_OF_LIGHT_M_PER_NS",
    "AIR_VELOCITY_M_PER_NS",
    "Grid",
    "ground_mask",
    "ground_top_m",
    "check_grid_fits_memory",
    "NodePlacement",
    "place_nodes",
    "relative_permittivity",
    "velocity_from_permittivity",
    "water_content_topp",
    "permittivity_topp",
    "petrophysics_arrays",
    "wavelength_m",
    "fresnel_half_width_m",
]
