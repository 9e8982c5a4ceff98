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

import numpy as np

from reconstruct.model.grid import Grid

__all__ = ["AXIS_INDEX", "stretched_geometry"]

#: Grid axis of each symmetry axis name.
AXIS_INDEX = {"x": 0, "y": 1, "z": 2}


def stretched_geometry(grid: Grid, xyz_m, ratio: float, axis: str = "z"):
    """The grid and node positions with every length along ``axis`` multiplied by ``ratio``.

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
