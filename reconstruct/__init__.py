"""voidcube.reconstruct: from first-arrival picks to a velocity cube, void bodies and a report.

Subpackages, lowest first (each imports only those below it; checked by
import-linter, see ``pyproject.toml``): ``model`` (grid, ground, node
placement, constants, petrophysics), ``io`` (site description, node and pick
tables, writers, manifest), ``forward`` (straight rays, eikonal fields, bent
rays), ``inverse`` (the regularised inversion, time-zero terms, robust
weights, straight- and bent-ray iterations), ``checks`` (pick checks),
``interpret`` (void bodies, screening), ``report`` (pictures, HTML pages,
output folders); ``cli`` is the command line. ``parallel`` runs tasks on
workers and ``errors`` holds the exceptions users meet.
"""

__version__ = "0.1.0"

from reconstruct.errors import DataQualityWarning, InputError
from reconstruct.model.grid import Grid, ground_mask
from reconstruct.inverse.solver import InversionOptions, InversionResult, invert_travel_times
from reconstruct.io.site import Site, load_site
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.tables import Nodes, Picks, read_nodes, read_picks
from reconstruct.inverse.straight import straight_ray_tomography
from reconstruct.report.folders import write_tomography

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
