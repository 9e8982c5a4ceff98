"""Placing nodes in the voxel model: box check and snapping to the ground.

Decisions (docs/processing.md says the same):

- A node outside the model box is an error naming the node table's file and
  line: it usually means a wrong frame or a box that is too small.
- A node of kind ``surface`` is moved vertically onto the ground surface as the
  voxel model sees it (the top face of the highest ground cell of its column,
  nudged a micrometre inside the cell). The shift is reported per node. A shift
  larger than the snap tolerance is an error: the height or the site's ground
  surface is wrong.
- Any other node (face, borehole or unspecified) that falls in an air cell is
  moved to the nearest point of the nearest ground cell, if that is within the
  snap tolerance; the shift is reported. Further away it is an error: a node
  in the air cannot be inverted as a rock node.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy import ndimage

from reconstruct.errors import InputError
from reconstruct.model.grid import Grid, ground_top_m

if TYPE_CHECKING:  # the model layer reads a node table but sits below the tables that parse it
    from reconstruct.io.tables import Nodes

__all__ = ["NodePlacement", "place_nodes"]

_INSIDE_M = 1e-6  # how far inside a ground cell a snapped node is put


@dataclass(frozen=True)
class NodePlacement:
    """Where each node sits in the model.

    Attributes
    ----------
    xyz_m : ndarray, shape (n, 3)
        Positions used by the forward model, metres.
    shift_m : ndarray, shape (n, 3)
        ``xyz_m`` minus the table's position.
    snapped : ndarray of bool, shape (n,)
    """

    xyz_m: np.ndarray
    shift_m: np.ndarray
    snapped: np.ndarray

    @property
    def shift_length_m(self) -> np.ndarray:
        return np.linalg.norm(self.shift_m, axis=1)


def place_nodes(nodes: Nodes, grid: Grid, ground: np.ndarray, *, snap_tolerance_m: float | None = None) -> NodePlacement:
    """Check nodes against the model box and snap them onto the ground.

    Parameters
    ----------
    nodes : Nodes
    grid : Grid
    ground : ndarray of bool, shape grid.shape
    snap_tolerance_m : float, optional
        Largest allowed snap, metres. Default: the larger of 2 m and two cell
        diagonals.

    Raises
    ------
    InputError
        For nodes outside the box or too far from the ground, naming file and line.
    """
    if snap_tolerance_m is None:
        snap_tolerance_m = max(2.0, 2.0 * float(np.linalg.norm(grid.cell_m)))
    xyz = np.array(nodes.xyz_m, dtype=float)
    problems = []
    inside = grid.contains(xyz)
    lo, hi = np.asarray(grid.origin_m), grid.end_m
    for k in np.flatnonzero(~inside):
        problems.append(
            f"{nodes.source}: line {nodes.lines[k]}: node {nodes.ids[k]} at "
            f"({xyz[k, 0]:g}, {xyz[k, 1]:g}, {xyz[k, 2]:g}) m lies outside the model box "
            f"x {lo[0]:g}..{hi[0]:g}, y {lo[1]:g}..{hi[1]:g}, z {lo[2]:g}..{hi[2]:g} m; "
            "check the node's coordinates and frame, or enlarge model.size_m in the site file"
        )
    if problems:
        raise InputError(problems)

    ground = np.asarray(ground, dtype=bool)
    new = xyz.copy()
    ijk = grid.cell_index(xyz)
    top = ground_top_m(grid, ground)
    kinds = np.array([k or "" for k in nodes.kinds])

    surface = kinds == "surface"
    for k in np.flatnonzero(surface):
        z_top = top[ijk[k, 0], ijk[k, 1]]
        if not np.isfinite(z_top):
            problems.append(
                f"{nodes.source}: line {nodes.lines[k]}: surface node {nodes.ids[k]} stands over "
                "a column with no ground cells in the model box; lower model.origin_m[2] or move the node"
            )
            continue
        new[k, 2] = z_top - _INSIDE_M

    in_air = ~ground[tuple(grid.cell_index(new).T)]
    others = np.flatnonzero(in_air & ~surface)
    if others.size:
        if not ground.any():
            raise InputError(f"{nodes.source}: the model has no ground cells to place nodes in; check the "
                             "site's ground surface and model box")
        _, nearest = ndimage.distance_transform_edt(~ground, sampling=grid.cell_m, return_indices=True)
        for k in others:
            cell = tuple(grid.cell_index(new[k])[0])
            target = np.array([nearest[a][cell] for a in range(3)])
            cell_lo = np.asarray(grid.origin_m) + target * np.asarray(grid.cell_m)
            cell_hi = cell_lo + np.asarray(grid.cell_m)
            new[k] = np.clip(new[k], cell_lo + _INSIDE_M, cell_hi - _INSIDE_M)

    shift = new - xyz
    too_far = np.linalg.norm(shift, axis=1) > snap_tolerance_m
    for k in np.flatnonzero(too_far):
        where = "onto the ground surface" if surface[k] else "out of the air into the nearest ground cell"
        problems.append(
            f"{nodes.source}: line {nodes.lines[k]}: node {nodes.ids[k]} would move "
            f"{np.linalg.norm(shift[k]):.2f} m {where} (tolerance {snap_tolerance_m:.2f} m); "
            "check its z (elevation, metres, up positive) or the site's ground surface"
        )
    if problems:
        raise InputError(problems)
    snapped = np.linalg.norm(shift, axis=1) > 0
    return NodePlacement(xyz_m=new, shift_m=shift, snapped=snapped)
