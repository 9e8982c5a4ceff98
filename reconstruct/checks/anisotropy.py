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


def fit_elliptical_anisotropy(a_xyz, b_xyz, time_ns, sigma_ns, axis="z", clock=None) -> EllipticalFit:
    """Fit the elliptical model to straight-ray picks through rock.

    Parameters
    ----------
    a_xyz, b_xyz : ndarray, shape (m, 3)
        Transmitter and receiver positions, metres.
    time_ns : ndarray, shape (m,)
        Pick times, ns, of rock arrivals (leave out air waves): corrected for
        the time-zero offsets, or raw with ``clock``.
    sigma_ns : ndarray, shape (m,)
    axis : str or 3 floats
        The symmetry axis (normal to the bedding).
    clock : tuple (tx, rx, n_nodes), optional
        Fit a clock offset per node at the same time (``t = T + tau_rx -
        tau_tx``; nonlinear least squares, scipy.optimize.least_squares),
        instead of taking the times as corrected.
    """
    d = np.asarray(b_xyz, dtype=float) - np.asarray(a_xyz, dtype=float)
    u = axis_vector(axis)
    along_axis = d @ u
    across = np.linalg.norm(d - along_axis[:, None] * u, axis=1)
    t = np.asarray(time_ns, dtype=float)
    sigma = np.asarray(sigma_ns, dtype=float)
    # t^2 = across^2 p + along^2 q, p = 1/v_perp^2, q = 1/v_axis^2; sigma(t^2) = 2 t sigma
    weight = 1.0 / (2.0 * t * sigma)
    A = np.column_stack([across**2, along_axis**2]) * weight[:, None]
    (p, q), *_ = np.linalg.lstsq(A, t**2 * weight, rcond=None)
    p, q = max(p, 1e-12), max(q, 1e-12)
    if clock is None:
        dof = max(t.size - 2, 1)
        reduced = float(np.sum((A @ [p, q] - t**2 * weight) ** 2) / dof)
        cov = np.linalg.pinv(A.T @ A) * max(reduced, 1.0)
    else:
        p, q, cov = _fit_with_clocks(across, along_axis, t, sigma, clock, p, q)
    ratio = float(np.sqrt(q / p))  # v_perp / v_axis
    grad = np.array([-0.5 * ratio / p, 0.5 * ratio / q])
    return EllipticalFit(velocity_along_beds_m_per_ns=float(1 / np.sqrt(p)),
                         velocity_across_beds_m_per_ns=float(1 / np.sqrt(q)), ratio=ratio,
                         ratio_sd=float(np.sqrt(max(grad @ cov @ grad, 0.0))), n_picks=int(t.size),
                         axis=tuple(float(v) for v in axis_vector(axis)))


def _fit_with_clocks(across, along, t, sigma, clock, p0, q0):
    """``t = sqrt(across^2 p + along^2 q) + tau_rx - tau_tx`` by nonlinear least squares; returns
    p, q and their 2 x 2 covariance (scaled by the reduced chi-square when above 1)."""
    import scipy.sparse as sp
    from scipy.optimize import least_squares

    from reconstruct.inverse.time_zero import time_zero_matrix

    n_nodes = int(clock[2])
    C = time_zero_matrix(clock[0], clock[1], n_nodes, "clock")
    scale = np.array([p0, q0])

    def residual(x):
        travel = np.sqrt(across**2 * x[0] * scale[0] + along**2 * x[1] * scale[1])
        return (travel + C @ x[2:] - t) / sigma

    def jacobian(x):
        travel = np.sqrt(across**2 * x[0] * scale[0] + along**2 * x[1] * scale[1])
        dp = across**2 * scale[0] / (2 * travel)
        dq = along**2 * scale[1] / (2 * travel)
        return sp.hstack([sp.csr_matrix(np.column_stack([dp, dq])), C]).multiply(1.0 / sigma[:, None]).tocsr()

    found = least_squares(residual, np.r_[1.0, 1.0, np.zeros(n_nodes)], jac=jacobian, method="trf",
                          x_scale="jac")
    J = jacobian(found.x).toarray()
    dof = max(t.size - 2 - (n_nodes - 1), 1)
    reduced = float(np.sum(found.fun**2) / dof)
    cov = np.linalg.pinv(J.T @ J)[:2, :2] * max(reduced, 1.0) * np.outer(scale, scale)
    return found.x[0] * scale[0], found.x[1] * scale[1], cov


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
    """The elliptical fit of the pick checks (:func:`anisotropy_record`), or None with fewer than 10
    usable picks or a spread of ray angles under 20 degrees.

    Fitted to the means of agreeing reciprocal pairs, in which the clock offsets cancel (the
    fitted time-zero terms would otherwise take up part of the anisotropy: a node deep in a hole
    sees mostly steep rays), or, with fewer than 10 such pairs, to the picks with a clock offset
    per node fitted alongside; only picks without a flag (rock arrivals).
    """
    clean = np.array([not f for f in checks.flags], dtype=bool)
    pairs = clean & np.isfinite(checks.reciprocal_mean_ns) & (np.arange(len(picks)) < checks.reciprocal)
    pairs &= clean[np.clip(checks.reciprocal, 0, None)]
    clock = None
    if pairs.sum() >= 10:
        keep, time, source = pairs, checks.reciprocal_mean_ns, "means of agreeing reciprocal pairs"
        sigma = checks.sigma_ns / np.sqrt(2.0)
    else:
        keep = clean & (picks.time_ns > 0)
        time, source, sigma = picks.time_ns, "picks, with a clock offset per node fitted alongside", checks.sigma_ns
        clock = (picks.tx[keep], picks.rx[keep], int(max(picks.tx.max(), picks.rx.max())) + 1)
    if keep.sum() < 10:
        return None
    xyz = np.asarray(xyz_m, dtype=float)
    a, b = xyz[picks.tx[keep]], xyz[picks.rx[keep]]
    angles = ray_angle_deg(a, b, axis)
    if np.ptp(angles) < 20.0:
        return None  # too narrow a spread of angles to tell the two velocities apart
    fit = fit_elliptical_anisotropy(a, b, time[keep], sigma[keep], axis, clock=clock)
    return {**anisotropy_record(fit), "ray_angles_deg": [float(angles.min()), float(angles.max())],
            "fitted_to": f"{int(keep.sum())} {source}"}
