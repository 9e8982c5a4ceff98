"""Petrophysics: radar velocity to relative permittivity to volumetric water content.

Two published relations, applied cell by cell to the velocity cube:

* the low-loss relation ``v = c / sqrt(K)``, so ``K = (c / v)**2``, with ``c``
  the speed of light in vacuum (:data:`scipy.constants.c`) and ``K`` the
  relative permittivity (Davis and Annan 1989);
* the empirical fit of Topp, Davis and Annan (1980) between ``K`` and the
  volumetric water content ``theta`` (m^3 of water per m^3 of material).

Caution: the Topp fit was made for mineral SOILS measured in coaxial
transmission lines. Rock has a different dry permittivity (limestone 4 to 8,
Davis and Annan 1989), so water contents computed for rock are indicative
only; they rank cells from drier to wetter, they do not measure moisture.
The low-loss relation needs a conductivity of a few mS/m or less.

References
----------
Davis, J. L., & Annan, A. P. (1989). Ground-penetrating radar for
    high-resolution mapping of soil and rock stratigraphy. Geophysical
    Prospecting, 37(5), 531-551.
Topp, G. C., Davis, J. L., & Annan, A. P. (1980). Electromagnetic
    determination of soil water content: measurements in coaxial transmission
    lines. Water Resources Research, 16(3), 574-582.
"""

from __future__ import annotations

import numpy as np

from reconstruct.model.constants import SPEED_OF_LIGHT_M_PER_NS

__all__ = [
    "SOIL_FIT_CAUTION",
    "TOPP_CALIBRATED_PERMITTIVITY",
    "relative_permittivity",
    "velocity_from_permittivity",
    "water_content_topp",
    "permittivity_topp",
    "petrophysics_arrays",
]

#: Text that goes with every water content voidcube reports.
SOIL_FIT_CAUTION = (
    "Water content from the Topp et al. (1980) fit, which was made for soils, "
    "not rock: read it as a relative indication (drier to wetter), not a measurement. "
    "Relative permittivity from K = (c/v)^2 assumes low-loss ground."
)

#: Range of relative permittivity over which the Topp fit is used; outside it
#: the water content is reported as NaN. The lower end is about where the
#: cubic crosses theta = 0 (computed: theta(1.9) = 0.0005), the upper end
#: about the wettest soils of the calibration, theta near 0.55 (from memory of
#: Topp et al. 1980; check the paper before relying on the upper end).
TOPP_CALIBRATED_PERMITTIVITY = (1.9, 40.0)


def _positive_finite(values, name):
    array = np.asarray(values, dtype=float)
    if np.any(~np.isfinite(array)) or np.any(array <= 0):
        raise ValueError(f"{name} must be finite and > 0")
    return array


def relative_permittivity(velocity_m_per_ns):
    """Relative permittivity ``K = (c / v)**2`` of low-loss ground.

    Parameters
    ----------
    velocity_m_per_ns : float or array
        Radar velocity in m/ns, > 0.

    Returns
    -------
    float or numpy.ndarray
        K, dimensionless (1 for air at c = 0.2998 m/ns).

    References
    ----------
    Davis and Annan (1989), see the module docstring.
    """
    v = _positive_finite(velocity_m_per_ns, "velocity_m_per_ns")
    k = (SPEED_OF_LIGHT_M_PER_NS / v) ** 2
    return k if k.ndim else float(k)


def velocity_from_permittivity(permittivity):
    """Radar velocity ``v = c / sqrt(K)`` in m/ns of low-loss ground."""
    k = _positive_finite(permittivity, "permittivity")
    v = SPEED_OF_LIGHT_M_PER_NS / np.sqrt(k)
    return v if v.ndim else float(v)


def water_content_topp(permittivity):
    """Volumetric water content from relative permittivity (Topp et al. 1980).

    ``theta = -0.053 + 0.0292 K - 5.5e-4 K**2 + 4.3e-6 K**3``

    Parameters
    ----------
    permittivity : float or array
        Relative permittivity K.

    Returns
    -------
    float or numpy.ndarray
        theta in m^3/m^3, the polynomial as published (negative below K of
        about 1.9; see :data:`TOPP_CALIBRATED_PERMITTIVITY`).

    Notes
    -----
    Fitted to soils; see :data:`SOIL_FIT_CAUTION`. The two directions of the
    fit are separate regressions and are not exact inverses of each other.

    References
    ----------
    Topp, Davis and Annan (1980), see the module docstring.
    """
    k = np.asarray(permittivity, dtype=float)
    theta = -0.053 + 0.0292 * k - 5.5e-4 * k**2 + 4.3e-6 * k**3
    return theta if theta.ndim else float(theta)


def permittivity_topp(water_content):
    """Relative permittivity from volumetric water content (Topp et al. 1980).

    ``K = 3.03 + 9.3 theta + 146.0 theta**2 - 76.7 theta**3``

    References
    ----------
    Topp, Davis and Annan (1980), see the module docstring.
    """
    theta = np.asarray(water_content, dtype=float)
    k = 3.03 + 9.3 * theta + 146.0 * theta**2 - 76.7 * theta**3
    return k if k.ndim else float(k)


def petrophysics_arrays(velocity_m_per_ns, ground) -> dict:
    """Cell arrays of relative permittivity and water content for a cube.

    Parameters
    ----------
    velocity_m_per_ns : ndarray, shape (nx, ny, nz)
        Velocity of every cell, m/ns, > 0.
    ground : ndarray of bool, shape (nx, ny, nz)

    Returns
    -------
    dict
        ``relative_permittivity`` (every cell) and ``water_content_topp``
        (m^3/m^3; NaN in air cells and where K lies outside
        :data:`TOPP_CALIBRATED_PERMITTIVITY`).
    """
    velocity = np.asarray(velocity_m_per_ns, dtype=float)
    ground = np.asarray(ground, dtype=bool)
    if ground.shape != velocity.shape:
        raise ValueError(f"ground has shape {ground.shape}, expected {velocity.shape}")
    k = relative_permittivity(velocity)
    low, high = TOPP_CALIBRATED_PERMITTIVITY
    usable = ground & (k >= low) & (k <= high)
    theta = np.where(usable, water_content_topp(k), np.nan)
    return {"relative_permittivity": k, "water_content_topp": theta}
