"""Exact first arrivals in a rock half-space under air: direct wave and refracted air wave.

An outside reference for air waves. Rock of slowness ``s_rock`` fills the
half-space below a flat ground surface; air of slowness ``s_air < s_rock``
lies above. Between two points A and B at depths ``d1, d2 >= 0`` below the
surface and horizontal offset ``x``, the first arrival is the least of

- the direct wave through the rock: ``sqrt(x^2 + (d1 - d2)^2) * s_rock``;
- the refracted air wave (head wave along the surface): down-going legs at the
  critical angle ``theta_c`` (``sin(theta_c) = s_air / s_rock``) join a path
  along the surface in the air,

      t = x * s_air + (d1 + d2) * sqrt(s_rock^2 - s_air^2),

  which exists once ``x >= (d1 + d2) * tan(theta_c)`` (at that offset it
  equals the time of the critically reflected path, and below it there is no
  refracted wave).

For two points on the surface (``d1 = d2 = 0``) the refracted wave is the
direct air wave ``x * s_air``.

References
----------
.. [1] Telford, W. M., Geldart, L. P. and Sheriff, R. E. (1990), Applied
   Geophysics, 2nd ed., Cambridge University Press, chapter 4 (seismic
   methods), the refraction section: the head-wave travel time of a two-layer
   case, here with the fast medium above; quoted from memory.
.. [2] Fermat's principle of least time: the formula is also the minimum over
   the two surface points U, W of ``|AU| s_rock + |UW| s_air + |WB| s_rock``,
   which :func:`fermat_surface_path_ns` finds numerically as a check.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize

__all__ = ["critical_offset_m", "head_wave_time_ns", "direct_time_ns", "half_space_first_arrival_ns",
           "fermat_surface_path_ns"]


def critical_offset_m(d1_m, d2_m, s_rock, s_air):
    """Smallest horizontal offset (m) at which the refracted air wave exists: ``(d1 + d2) tan(theta_c)``."""
    sin_c = s_air / s_rock
    return (np.asarray(d1_m, dtype=float) + np.asarray(d2_m, dtype=float)) * sin_c / np.sqrt(1.0 - sin_c**2)


def head_wave_time_ns(x_m, d1_m, d2_m, s_rock, s_air):
    """Time (ns) of the refracted air wave; ``inf`` where the offset is below the critical offset.

    Parameters
    ----------
    x_m : float or array
        Horizontal offset of the two points, metres.
    d1_m, d2_m : float or array
        Depths of the points below the ground surface (>= 0), metres.
    s_rock, s_air : float
        Slowness of rock and air, ns/m, with ``s_air < s_rock``.
    """
    if not s_air < s_rock:
        raise ValueError("the refracted air wave needs air faster than rock (s_air < s_rock)")
    x = np.asarray(x_m, dtype=float)
    d1, d2 = np.asarray(d1_m, dtype=float), np.asarray(d2_m, dtype=float)
    if np.any(d1 < 0) or np.any(d2 < 0):
        raise ValueError("depths must be >= 0 (points at or below the ground surface)")
    t = x * s_air + (d1 + d2) * np.sqrt(s_rock**2 - s_air**2)
    exists = x >= critical_offset_m(d1, d2, s_rock, s_air) * (1.0 - 1e-12)
    return np.where(exists, t, np.inf)


def direct_time_ns(x_m, d1_m, d2_m, s_rock):
    """Time (ns) of the direct wave through homogeneous rock."""
    return np.hypot(np.asarray(x_m, dtype=float), np.asarray(d1_m, dtype=float) - np.asarray(d2_m, dtype=float)) * s_rock


def half_space_first_arrival_ns(a, b, ground_m, v_rock, v_air):
    """First arrival (ns) between points ``a`` and ``b`` (x, y, z; at or below the flat ground at ``ground_m``)."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    x = np.hypot(*(b[..., :2] - a[..., :2]).T) if a.ndim > 1 else float(np.hypot(*(b[:2] - a[:2])))
    d1, d2 = ground_m - a[..., 2], ground_m - b[..., 2]
    s_rock, s_air = 1.0 / v_rock, 1.0 / v_air
    return np.minimum(direct_time_ns(x, d1, d2, s_rock), head_wave_time_ns(x, d1, d2, s_rock, s_air))


def fermat_surface_path_ns(x_m, d1_m, d2_m, s_rock, s_air):
    """Least time over paths rock -> surface point U -> air along the surface -> W -> rock (numerical).

    A check of :func:`head_wave_time_ns` by Fermat's principle: the positions
    ``u <= w`` of U and W on the surface line between the points are found
    with ``scipy.optimize.minimize`` (Nelder-Mead).
    """
    def cost(p):
        u, w = p
        return np.hypot(u, d1_m) * s_rock + abs(w - u) * s_air + np.hypot(x_m - w, d2_m) * s_rock

    starts = ([0.0, x_m], [0.25 * x_m, 0.75 * x_m], [0.5 * x_m, 0.5 * x_m])
    return min(minimize(cost, s, method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12,
                                                                   "maxiter": 20000}).fun for s in starts)
