"""Resolution floor of first-arrival tomography: wavelength and first Fresnel zone.

A first arrival is not sensitive along a line but over the first Fresnel zone
around the ray: the volume of paths no more than half a period longer than the
ray. Features much narrower than this zone are averaged away whatever the ray
density, so its width is the resolution floor used by the planner (coverage)
and by the void screening (unresolved indications).

The zone is taken for a homogeneous medium between two points a distance
``L`` apart: the ellipsoid of revolution with those points as foci on which
the path length is ``L + lambda / 2``.

References
----------
Williamson, P. R. (1991). A guide to the limits of resolution imposed by
    scattering in ray tomography. Geophysics, 56(2), 202-207.
Spetzler, J., & Snieder, R. (2004). The Fresnel volume and transmitted waves.
    Geophysics, 69(3), 653-663. https://doi.org/10.1190/1.1759451
"""

from __future__ import annotations

import numpy as np

__all__ = ["wavelength_m", "fresnel_half_width_m"]


def wavelength_m(velocity_m_per_ns, frequency_mhz):
    """Wavelength in metres of a wave of ``frequency_mhz`` at ``velocity_m_per_ns``.

    lambda = v / f with v in m/ns (1e9 m/s) and f in MHz (1e6 Hz), so
    lambda = 1000 v / f.
    """
    velocity = np.asarray(velocity_m_per_ns, dtype=float)
    frequency = np.asarray(frequency_mhz, dtype=float)
    if np.any(~np.isfinite(velocity)) or np.any(velocity <= 0):
        raise ValueError("velocity_m_per_ns must be finite and > 0")
    if np.any(~np.isfinite(frequency)) or np.any(frequency <= 0):
        raise ValueError("frequency_mhz must be finite and > 0")
    return 1000.0 * velocity / frequency


def fresnel_half_width_m(wavelength, path_length_m, distance_from_source_m=None):
    """Half-width (radius) of the first Fresnel zone of a transmitted wave, metres.

    Parameters
    ----------
    wavelength : float or array
        Dominant wavelength, metres.
    path_length_m : float or array
        Source-receiver distance ``L``, metres.
    distance_from_source_m : float or array, optional
        Position along the ray; default the midpoint ``L / 2`` where the zone
        is widest.

    Returns
    -------
    numpy.ndarray or float
        Radius of the zone at that point, metres.

    Notes
    -----
    The zone is the prolate spheroid with foci at source and receiver and
    major axis ``L + lambda / 2`` (half-period criterion). With
    ``A = (L + lambda/2) / 2`` and ``B**2 = A**2 - (L/2)**2`` its radius at a
    distance ``x`` from the midpoint is ``B sqrt(1 - x**2 / A**2)``. At the
    midpoint this is ``sqrt(lambda L / 4 + lambda**2 / 16)``, about
    ``sqrt(lambda L) / 2`` when ``L >> lambda``.

    References
    ----------
    Williamson (1991); Spetzler & Snieder (2004) (see the module docstring).
    """
    lam = np.asarray(wavelength, dtype=float)
    length = np.asarray(path_length_m, dtype=float)
    if np.any(~np.isfinite(lam)) or np.any(lam <= 0):
        raise ValueError("wavelength must be finite and > 0 (metres)")
    if np.any(~np.isfinite(length)) or np.any(length < 0):
        raise ValueError("path_length_m must be finite and >= 0 (metres)")
    semi_major = 0.5 * (length + 0.5 * lam)
    semi_minor_sq = semi_major**2 - (0.5 * length) ** 2
    if distance_from_source_m is None:
        offset = np.zeros_like(length)
    else:
        offset = np.asarray(distance_from_source_m, dtype=float) - 0.5 * length
    ratio = np.clip(1.0 - (offset / semi_major) ** 2, 0.0, None)
    radius = np.sqrt(semi_minor_sq * ratio)
    return radius if radius.ndim else float(radius)
