"""Apparent velocity against ray angle: is the rock measurably anisotropic?

Bedded or foliated rock carries radar waves faster along its layers than
across them. In the elliptical model the wavefront from a point is an
ellipsoid of revolution about the symmetry axis (the normal to the bedding),
and the straight-ray travel time between two points in a homogeneous rock is

    t^2 = (d_perp / v_perp)^2 + (d_axis / v_axis)^2,

with ``d_axis`` the separation along the axis, ``d_perp`` across it,
``v_perp`` the velocity along the bedding and ``v_axis`` the velocity along
the axis (across the bedding). Given the picks corrected for their time-zero
offsets, ``t^2`` is linear in ``1 / v_perp^2`` and ``1 / v_axis^2``, so both
follow from weighted least squares with their covariance; the anisotropy
ratio ``v_perp / v_axis`` and its standard deviation follow by linearised
propagation. The rock is called measurably anisotropic when the ratio
differs from 1 by more than three standard deviations.

References
----------
.. [1] Thomsen, L. (1986), Weak elastic anisotropy, Geophysics 51(10),
   1954-1966 (elliptical anisotropy is the case epsilon = delta).
.. [2] Aster, R. C., Borchers, B. and Thurber, C. H. (2013), Parameter
   Estimation and Inverse Problems, 2nd ed., section 2.2 (covariance of a
   least-squares fit; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["AXES", "axis_vector", "EllipticalFit", "fit_elliptical_anisotropy", "anisotropy_record",
           "anisotropy_from_pick_checks",
           "ray_angle_deg"]

#: Symmetry axes that the inversion supports: along a grid axis (``z``: horizontal bedding).
AXES = {"z": (0.0, 0.0, 1.0), "x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0)}

_MEASURABLE_SIGMAS = 3.0


def axis_vector(axis) -> np.ndarray:
    """The symmetry axis as a unit vector: a name of :data:`AXES` or three numbers."""
    v = np.asarray(AXES[axis] if isinstance(axis, str) else axis, dtype=float)
    return v / np.linalg.norm(v)


def ray_angle_deg(a_xyz, b_xyz, axis) -> np.ndarray:
    """Angle between each straight ray and the symmetry axis, 0 to 90 degrees."""
    d = np.asarray(b_xyz, dtype=float) - np.asarray(a_xyz, dtype=float)
    cos = np.abs(d @ axis_vector(axis)) / np.maximum(np.linalg.norm(d, axis=-1), 1e-12)
    return np.degrees(np.arccos(np.clip(cos, 0.0, 1.0)))


@dataclass(frozen=True)
class EllipticalFit:
    """Velocities along and across the bedding from the picks, with standard deviations (m/ns)."""

    velocity_along_beds_m_per_ns: float
    velocity_across_beds_m_per_ns: float
    ratio: float  # along / across
    ratio_sd: float
    n_picks: int
    axis: tuple

    @property
    def measurable(self) -> bool:
        return bool(abs(self.ratio - 1.0) > _MEASURABLE_SIGMAS * self.ratio_sd)


def fit_elliptical_anisotropy(a_xyz, b_xyz, time_ns, sigma_ns, axis="z") -> EllipticalFit:
    """Fit the elliptical model to straight-ray picks through rock.

    Parameters
    ----------
    a_xyz, b_xyz : ndarray, shape (m, 3)
        Transmitter and receiver positions, metres.
    time_ns : ndarray, shape (m,)
        Picks corrected for the time-zero offsets, ns (rock arrivals only:
        leave out air waves).
    sigma_ns : ndarray, shape (m,)
    axis : str or 3 floats
        The symmetry axis (normal to the bedding).
    """
    d = np.asarray(b_xyz, dtype=float) - np.asarray(a_xyz, dtype=float)
    u = axis_vector(axis)
    along_axis = d @ u
    across = np.linalg.norm(d - along_axis[:, None] * u, axis=1)
    t = np.asarray(time_ns, dtype=float)
    # t^2 = across^2 p + along^2 q, p = 1/v_perp^2, q = 1/v_axis^2; sigma(t^2) = 2 t sigma
    weight = 1.0 / (2.0 * t * np.asarray(sigma_ns, dtype=float))
    A = np.column_stack([across**2, along_axis**2]) * weight[:, None]
    rhs = t**2 * weight
    (p, q), *_ = np.linalg.lstsq(A, rhs, rcond=None)
    dof = max(t.size - 2, 1)
    reduced = float(np.sum((A @ [p, q] - rhs) ** 2) / dof)
    cov = np.linalg.pinv(A.T @ A) * max(reduced, 1.0)
    p, q = max(p, 1e-12), max(q, 1e-12)
    ratio = float(np.sqrt(q / p))  # v_perp / v_axis
    grad = np.array([-0.5 * ratio / p, 0.5 * ratio / q])
    return EllipticalFit(velocity_along_beds_m_per_ns=float(1 / np.sqrt(p)),
                          velocity_across_beds_m_per_ns=float(1 / np.sqrt(q)), ratio=ratio,
                          ratio_sd=float(np.sqrt(max(grad @ cov @ grad, 0.0))), n_picks=int(t.size),
                          axis=tuple(float(v) for v in axis_vector(axis)))


def anisotropy_record(fit: EllipticalFit) -> dict:
    """The fit in words and numbers for a summary JSON."""
    return {
        "model": "elliptical: t^2 = (d_across_axis / v_along_beds)^2 + (d_along_axis / v_across_beds)^2",
        "axis": list(fit.axis),
        "velocity_along_beds_m_per_ns": fit.velocity_along_beds_m_per_ns,
        "velocity_across_beds_m_per_ns": fit.velocity_across_beds_m_per_ns,
        "ratio": fit.ratio, "ratio_sd": fit.ratio_sd, "picks": fit.n_picks,
        "measurably_anisotropic": fit.measurable,
        "words": (f"velocity along the beds / across them = {fit.ratio:.3f} +- {fit.ratio_sd:.3f} (1 sd): "
                  + ("measurably anisotropic; invert with --anisotropy-ratio" if fit.measurable
                     else "no measurable anisotropy")),
    }


def anisotropy_from_pick_checks(picks, checks, xyz_m, axis="z") -> dict | None:
    """The elliptical fit of the pick checks (:func:`anisotropy_record`) on the picks that carry no
    flag (rock arrivals, corrected for the time-zero offsets); None with fewer than 10 such picks
    or no spread of ray angles."""
    keep = np.array([not f for f in checks.flags], dtype=bool) & np.isfinite(checks.corrected_time_ns)
    keep &= checks.corrected_time_ns > 0
    if keep.sum() < 10:
        return None
    xyz = np.asarray(xyz_m, dtype=float)
    a, b = xyz[picks.tx[keep]], xyz[picks.rx[keep]]
    angles = ray_angle_deg(a, b, axis)
    if np.ptp(angles) < 20.0:
        return None  # too narrow a spread of angles to tell the two velocities apart
    fit = fit_elliptical_anisotropy(a, b, checks.corrected_time_ns[keep], checks.sigma_ns[keep], axis)
    return {**anisotropy_record(fit), "ray_angles_deg": [float(angles.min()), float(angles.max())]}
