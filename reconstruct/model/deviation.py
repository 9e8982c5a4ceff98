"""Positions along a deviated hole from its deviation survey, by the minimum curvature method.

A deviation survey lists stations down a hole: measured depth (the length
along the hole from the collar, m), inclination (the angle from vertical
down, degrees; 0 is vertical, 90 horizontal) and azimuth (the direction in
plan, degrees clockwise from north, +y of the local frame). Between two
stations the minimum curvature method takes the circular arc that leaves the
first station along its direction and arrives at the second along its
direction; the position change over a course of length ``L`` with tangent
unit vectors ``t1``, ``t2`` and dogleg angle ``beta`` (the angle between them)
is

    dp = L / 2 * (t1 + t2) * RF,   RF = 2 / beta * tan(beta / 2)

(RF = 1 for a straight course). Points between stations lie on the same arc:
the tangent turns at a constant rate with the length along it, so the point
at a fraction ``f`` of the course follows from the same formula over the
partial course ``f L``, whose end tangent is the spherical interpolation of
``t1`` and ``t2`` at ``f``.

The local frame is x east, y north, z up; depths grow downwards, so the
tangent of a station is ``(sin i sin a, sin i cos a, -cos i)``.

References
----------
.. [1] Sawaryn, S. J. and Thorogood, J. L. (2005), A compendium of
   directional calculations based on the minimum curvature method, SPE
   Drilling & Completion 20(1), 24-36, doi:10.2118/84246-PA.
.. [2] Taylor, H. L. and Mason, M. C. (1972), A systematic approach to well
   surveying calculations, SPE Journal 12(6), 474-488 (the method's early
   description; cited from memory).
"""

from __future__ import annotations

import numpy as np

__all__ = ["station_tangents", "ratio_factor", "minimum_curvature_stations", "positions_along_hole"]


def station_tangents(inclination_deg, azimuth_deg) -> np.ndarray:
    """Unit vectors (x east, y north, z up) down the hole at each station, shape (n, 3)."""
    inc = np.radians(np.asarray(inclination_deg, dtype=float))
    az = np.radians(np.asarray(azimuth_deg, dtype=float))
    return np.stack([np.sin(inc) * np.sin(az), np.sin(inc) * np.cos(az), -np.cos(inc)], axis=-1)


def _dogleg_rad(t1, t2) -> np.ndarray:
    """Angle between unit vectors, radians, stable for small and large angles."""
    return 2.0 * np.arctan2(np.linalg.norm(t1 - t2, axis=-1), np.linalg.norm(t1 + t2, axis=-1))


def ratio_factor(dogleg_rad) -> np.ndarray:
    """``2 / beta * tan(beta / 2)``, with its limit 1 (plus beta^2 / 12) for small doglegs."""
    beta = np.asarray(dogleg_rad, dtype=float)
    small = beta < 1e-4
    safe = np.where(small, 1.0, beta)
    return np.where(small, 1.0 + beta**2 / 12.0, 2.0 / safe * np.tan(safe / 2.0))


def minimum_curvature_stations(measured_depth_m, inclination_deg, azimuth_deg, collar_m) -> np.ndarray:
    """Positions (x, y, z, metres) of the survey stations, shape (n, 3).

    Parameters
    ----------
    measured_depth_m : array_like, shape (n,)
        Length along the hole from the collar, strictly increasing; the first
        station is taken to be at the collar's depth along the hole (usually 0).
    inclination_deg, azimuth_deg : array_like, shape (n,)
    collar_m : array_like, shape (3,)
        Position of the first station.

    References
    ----------
    Sawaryn and Thorogood (2005), see the module notes.
    """
    md = np.asarray(measured_depth_m, dtype=float)
    t = station_tangents(inclination_deg, azimuth_deg)
    course = np.diff(md)
    rf = ratio_factor(_dogleg_rad(t[:-1], t[1:]))
    steps = (course * rf / 2.0)[:, None] * (t[:-1] + t[1:])
    return np.asarray(collar_m, dtype=float) + np.vstack([np.zeros(3), np.cumsum(steps, axis=0)])


def _slerp(t1, t2, fraction, beta):
    """Spherical interpolation between unit vectors at ``fraction`` of their angle ``beta``."""
    fraction = np.asarray(fraction, dtype=float)[..., None]
    beta = np.asarray(beta, dtype=float)[..., None]
    small = beta < 1e-8
    safe = np.where(small, 1.0, beta)
    a = np.where(small, 1.0 - fraction, np.sin((1.0 - fraction) * safe) / np.sin(safe))
    b = np.where(small, fraction, np.sin(fraction * safe) / np.sin(safe))
    v = a * t1 + b * t2
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def positions_along_hole(measured_depth_m, inclination_deg, azimuth_deg, collar_m, depth_m):
    """Positions and tangents at any lengths along the hole, on the minimum curvature arcs.

    Parameters
    ----------
    measured_depth_m, inclination_deg, azimuth_deg : array_like, shape (n,)
        The survey (see :func:`minimum_curvature_stations`).
    collar_m : array_like, shape (3,)
    depth_m : array_like, shape (m,)
        Lengths along the hole from the collar, between the first and the
        last station (beyond the last station the hole is extended straight
        along the last tangent, as drilling practice does for the rat hole
        below the last survey, common practice, no published source).

    Returns
    -------
    positions : ndarray, shape (m, 3)
    tangents : ndarray, shape (m, 3)
        Unit vectors down the hole there.
    """
    md = np.asarray(measured_depth_m, dtype=float)
    t = station_tangents(inclination_deg, azimuth_deg)
    stations = minimum_curvature_stations(md, inclination_deg, azimuth_deg, collar_m)
    d = np.atleast_1d(np.asarray(depth_m, dtype=float))
    k = np.clip(np.searchsorted(md, d, side="right") - 1, 0, max(md.size - 2, 0))
    if md.size == 1:
        return stations[0] + (d - md[0])[:, None] * t[0], np.repeat(t[:1], d.size, axis=0)
    t1, t2 = t[k], t[k + 1]
    beta = _dogleg_rad(t1, t2)
    course = md[k + 1] - md[k]
    fraction = (d - md[k]) / course
    inside = fraction <= 1.0
    f = np.clip(fraction, 0.0, 1.0)
    t_end = _slerp(t1, t2, f, beta)
    partial = (f * course * ratio_factor(f * beta) / 2.0)[:, None] * (t1 + t_end)
    positions = stations[k] + partial
    # beyond the last station: straight on along its tangent
    beyond = (~inside)[:, None] * ((d - md[k + 1])[:, None] * t2)
    tangents = np.where(inside[:, None], t_end, t2)
    return positions + beyond, tangents
