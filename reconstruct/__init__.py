"""voidcube.reconstruct: site, grid, tables, ray operators and inversion.

The base package of voidcube. ``plan`` builds on it; it never imports ``plan``.
"""

__version__ = "0.1.0"

from .errors import DataQualityWarning, InputError
from .grid import Grid, ground_mask
from .inversion import InversionOptions, InversionResult, invert_travel_times
from .site import Site, load_site
from .straight_rays import straight_ray_matrix
from .tables import Nodes, Picks, read_nodes, read_picks
from .workflow import straight_ray_tomography, write_tomography

__all__ = [
    "__version__",
    "DataQualityWarning",
    "InputError",
    "Grid",
    "ground_mask",
    "InversionOptions",
    "InversionResult",
    "invert_travel_times",
    "Site",
    "load_site",
    "straight_ray_matrix",
    "Nodes",
    "Picks",
    "read_nodes",
    "read_picks",
    "straight_ray_tomography",
    "write_tomography",
]
