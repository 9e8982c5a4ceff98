"""Inputs and outputs: the site description (site.yaml), the node and pick
tables (CSV), atomic writers, VTK files and the run manifest.

Imports only ``reconstruct.model`` below it.
"""

from reconstruct.io.site import (
    Site,
    load_site,
    parse_site,
    model_grid,
    points_in_polygon,
)
from reconstruct.io.tables import (
    Nodes,
    Picks,
    ExcludedPick,
    read_nodes,
    read_picks,
)
from reconstruct.io.outputs import (
    atomic_path,
    write_text_atomic,
    write_json_atomic,
    write_csv_atomic,
    write_cell_arrays_vti,
    read_cell_arrays_vti,
    build_manifest,
    extend_manifest,
    make_output_folder,
)

__all__ = [
    "Site",
    "load_site",
    "parse_site",
    "model_grid",
    "points_in_polygon",
    "Nodes",
    "Picks",
    "ExcludedPick",
    "read_nodes",
    "read_picks",
    "atomic_path",
    "write_text_atomic",
    "write_json_atomic",
    "write_csv_atomic",
    "write_cell_arrays_vti",
    "read_cell_arrays_vti",
    "build_manifest",
    "extend_manifest",
    "make_output_folder",
]
