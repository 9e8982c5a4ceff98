"""Elliptical anisotropy with its symmetry axis along a grid axis, by stretching the geometry.

In elliptically anisotropic rock the ray (group) slowness in a direction at
angle phi to the symmetry axis is ``s_perp sqrt(sin^2 phi + r^2 cos^2 phi)``,
with ``s_perp`` the slowness along the bedding and ``r = v_perp / v_axis``
the ratio of the velocities along and across the bedding (Thomsen 1986, the
case epsilon = delta). Stretching every length along the axis by ``r``
turns this rock into an isotropic one of slowness ``s_perp``: a straight
segment ``(d_perp, d_axis)`` takes ``s_perp sqrt(d_perp^2 + (r d_axis)^2)``,
the same time. With the axis along a grid axis the stretch maps every cell
onto one cell of a grid whose cells are ``r`` times longer along that axis,
so the straight-ray lengths and the eikonal fields of the stretched grid, with
the same slowness array, give the anisotropic times, and their per-cell
lengths are the derivatives of the times with respect to ``s_perp``: one set
of physics for straight and bent rays. With a ratio that is the same
everywhere (the bedding of one rock mass) this is exact for any ``s_perp``
field.

Limit: the air above the ground is stretched too. Air waves run along the
ground (across a vertical axis), where nothing changes; a vertical leg in air
is ``r`` times too long (air is isotropic). Keep the axis vertical (``z``)
where air waves matter.

References
----------
.. [1] Thomsen, L. (1986), Weak elastic anisotropy, Geophysics 51(10), 1954-1966.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from reconstruct.model.grid import Grid

__all__ = ["AXIS_INDEX", "axis_from_text", "stretched_geometry", "AnisotropicGeometry", "anisotropic_geometry"]

#: Grid axis of each symmetry axis name.
AXIS_INDEX = {"x": 0, "y": 1, "z": 2}


def axis_from_text(text: str) -> np.ndarray:
    """The symmetry axis (unit vector, x east, y north, z up) from ``x``, ``y``, ``z`` or the
    bedding's ``DIP/DIPDIRECTION`` in degrees (e.g. ``30/120``: beds dipping 30 degrees towards
    azimuth 120, clockwise from north); the axis is the normal to the beds. ValueError when the
    text is neither."""
    text = str(text).strip().lower()
    if text in AXIS_INDEX:
        v = np.zeros(3)
        v[AXIS_INDEX[text]] = 1.0
        return v
    try:
        dip, direction = (float(v) for v in text.split("/"))
    except ValueError:
        raise ValueError(f"axis must be x, y, z or the bedding's DIP/DIPDIRECTION in degrees, e.g. 30/120 "
                         f"(got {text!r})") from None
    if not (0.0 <= dip <= 90.0 and 0.0 <= direction <= 360.0):
        raise ValueError(f"bedding dip must be 0 to 90 and dip direction 0 to 360 degrees (got {text!r})")
    d, a = np.radians(dip), np.radians(direction)
    return np.array([np.sin(d) * np.sin(a), np.sin(d) * np.cos(a), np.cos(d)])


def stretched_geometry(grid: Grid, xyz_m, ratio: float, axis: str = "z"):
    """The grid and node positions with every length along a grid ``axis`` multiplied by ``ratio``.

    Parameters
    ----------
    grid : Grid
    xyz_m : ndarray, shape (n, 3)
    ratio : float
        Velocity along the bedding over velocity across it (> 0); 1 changes nothing.
    axis : {'x', 'y', 'z'}
        The symmetry axis (normal to the bedding).

    Returns
    -------
    grid : Grid
        Same shape and origin, cells ``ratio`` times longer along ``axis``.
    xyz_m : ndarray, shape (n, 3)
    """
    if not ratio > 0:
        raise ValueError(f"the anisotropy ratio must be > 0 (got {ratio})")
    if axis not in AXIS_INDEX:
        raise ValueError(f"axis must be one of {', '.join(AXIS_INDEX)} (got {axis!r})")
    xyz = np.array(xyz_m, dtype=float)
    if ratio == 1.0:
        return grid, xyz
    k = AXIS_INDEX[axis]
    cell = list(grid.cell_m)
    cell[k] *= ratio
    xyz[..., k] = grid.origin_m[k] + ratio * (xyz[..., k] - grid.origin_m[k])
    return Grid(grid.origin_m, tuple(cell), grid.shape), xyz


@dataclass(frozen=True)
class AnisotropicGeometry:
    """Where the physics of an elliptically anisotropic model runs: an isotropic grid.

    ``grid`` and ``xyz_m`` are the stretched grid and nodes; ``to_model`` maps
    the cells of ``grid`` to the model's cells (sparse, one 1 per row inside
    the model box, an empty row outside it), None where every cell is a model
    cell (no anisotropy, or the axis along a grid axis). ``stretch`` is the
    linear map from site to stretched coordinates, ``origin_m`` its fixed point.
    """

    grid: Grid
    xyz_m: np.ndarray
    to_model: sp.csr_matrix | None
    stretch: np.ndarray
    origin_m: np.ndarray

    def slowness(self, model_slowness, outside_ns_per_m: float) -> np.ndarray:
        """The slowness on ``grid`` (its shape) from the model's; cells outside the model box take
        ``outside_ns_per_m`` (slow, so that no ray runs there)."""
        flat = np.asarray(model_slowness, dtype=float).ravel()
        if self.to_model is None:
            return flat.reshape(self.grid.shape)
        inside = np.asarray(self.to_model.sum(axis=1)).ravel() > 0
        return np.where(inside, self.to_model @ flat, outside_ns_per_m).reshape(self.grid.shape)

    def operator(self, matrix) -> sp.csr_matrix:
        """Per-cell lengths on ``grid`` summed onto the model's cells."""
        return sp.csr_matrix(matrix) if self.to_model is None else sp.csr_matrix(matrix @ self.to_model)

    def to_site(self, points) -> np.ndarray:
        """Points of ``grid`` back in site coordinates."""
        p = np.asarray(points, dtype=float)
        return self.origin_m + (p - self.origin_m) @ np.linalg.inv(self.stretch).T


def anisotropic_geometry(grid: Grid, xyz_m, ratio: float, axis="z") -> AnisotropicGeometry:
    """The isotropic geometry of an elliptically anisotropic model (see the module notes).

    With the axis along a grid axis the stretched grid maps cell to cell
    (:func:`stretched_geometry`, exact). Otherwise the stretched box is cut
    into cubic cells of the model's smallest cell size, each taking the
    model cell under its centre mapped back (nearest cell): the times are
    those of that resampled model, and ``to_model`` carries the per-cell
    lengths back onto the model's cells, so that times and their derivatives
    stay one set of physics.
    """
    xyz = np.array(xyz_m, dtype=float)
    origin = np.asarray(grid.origin_m, dtype=float)
    a = axis_from_text(axis) if isinstance(axis, str) else np.asarray(axis, dtype=float) / np.linalg.norm(axis)
    stretch = np.eye(3) + (ratio - 1.0) * np.outer(a, a)
    named = next((name for name, k in AXIS_INDEX.items() if abs(a[k]) > 1 - 1e-12), None)
    if ratio == 1.0 or named is not None:
        g, p = stretched_geometry(grid, xyz, ratio, named or "z")
        return AnisotropicGeometry(g, p, None, stretch, origin)
    end = np.asarray(grid.end_m, dtype=float)
    corners = np.array([[x, y, z] for x in (origin[0], end[0]) for y in (origin[1], end[1])
                        for z in (origin[2], end[2])])
    mapped = origin + (corners - origin) @ stretch.T
    lo, hi = mapped.min(axis=0), mapped.max(axis=0)
    cell = float(min(grid.cell_m))
    shape = tuple(int(np.ceil((h - l) / cell - 1e-9)) for l, h in zip(lo, hi))
    new = Grid(tuple(lo), (cell, cell, cell), shape)
    centres = new.cell_centres_m().reshape(-1, 3)
    back = origin + (centres - origin) @ np.linalg.inv(stretch).T
    inside = np.flatnonzero(grid.contains(back))
    columns = grid.flat_index(grid.cell_index(back[inside]))
    to_model = sp.csr_matrix((np.ones(inside.size), (inside, columns)), shape=(new.n_cells, grid.n_cells))
    return AnisotropicGeometry(new, origin + (xyz - origin) @ stretch.T, to_model, stretch, origin)
