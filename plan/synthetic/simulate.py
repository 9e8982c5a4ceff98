"""Synthetic first-arrival picks from a truth model (for the demo and recovery tests).

The times are first arrivals through the truth model voxelised on a grid
``refine`` times finer than the model grid (so that inverting them is not the
exact inverse of the forward model): eikonal travel-time fields with the air
included (``rays="bent"``, default), or straight-ray times (``rays="straight"``,
for tests of the straight-ray inversion); plus the nodes' time-zero offsets
(clock offsets, ``time_zero_ns[rx] - time_zero_ns[tx]``), Gaussian pick
noise and, when the truth model asks for them, gross outliers and clock drift.

Clock drift: each node's clock offset then changes linearly with the shot
time, ``tau_k(t) = offset_k + drift_k (t - t_mid)`` (the ``clock_drift``
time-zero model of :mod:`reconstruct.inverse.time_zero`), with drifts drawn
with the spread ``clock_drift_sigma_ns_per_h`` from a stream of their own
(switching drift on changes no other number). Node ``k`` fires at ``k``
times ``shot_interval_s``; every pick carries its shot time.

Gross outliers stand for cycle skips and picks made on noise: a seeded share
``outlier_fraction`` of the picks (chosen at random, exactly
``round(fraction * n_picks)`` of them) gets an error of random sign and a size
drawn uniformly between 0.5 and 1.5 times ``outlier_size_ns``. An early error
that would bring a time to 2 ns or less is made late instead, so every
simulated time stays positive. The outliers are drawn from their own random
stream (seeded by ``seed``), so switching them on does not change the
time-zero offsets or the noise of the other picks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconstruct.model.grid import Grid, check_grid_fits_memory, ground_mask
from reconstruct.model.placement import place_nodes
from reconstruct.io.site import Site
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.tables import Nodes

from plan.synthetic.truth import TruthModel, truth_velocity

__all__ = ["SimulatedSurvey", "refined_grid", "all_pairs", "simulate_picks", "gross_errors", "drop_missed_picks"]


@dataclass(frozen=True)
class SimulatedSurvey:
    tx: np.ndarray
    rx: np.ndarray
    time_ns: np.ndarray
    sigma_ns: np.ndarray
    true_travel_time_ns: np.ndarray
    time_zero_ns: np.ndarray  # per node: the true time-zero offset (clock offset), mean zero
    node_xyz_m: np.ndarray
    outlier_error_ns: np.ndarray | None = None  # per pick: the gross error added (0 for good picks)
    shot_time_s: np.ndarray | None = None  # per pick: when its shot was fired, s
    clock_drift_ns_per_h: np.ndarray | None = None  # per node: the true drift, mean zero

    @property
    def outlier(self) -> np.ndarray:
        """True for picks made gross outliers."""
        if self.outlier_error_ns is None:
            return np.zeros(self.tx.size, dtype=bool)
        return self.outlier_error_ns != 0


def refined_grid(grid: Grid, refine: int) -> Grid:
    """The same box with ``refine`` times more cells along each axis."""
    return Grid(grid.origin_m, tuple(c / refine for c in grid.cell_m), tuple(n * refine for n in grid.shape))


def all_pairs(n_nodes: int, *, both_directions: bool = True, xyz_m=None, max_distance_m=None):
    """Transmitter and receiver indices of every pair of distinct nodes."""
    tx, rx = np.nonzero(~np.eye(n_nodes, dtype=bool)) if both_directions else np.triu_indices(n_nodes, 1)
    tx, rx = np.asarray(tx), np.asarray(rx)
    if max_distance_m is not None and xyz_m is not None:
        d = np.linalg.norm(np.asarray(xyz_m)[rx] - np.asarray(xyz_m)[tx], axis=1)
        keep = d <= max_distance_m
        tx, rx = tx[keep], rx[keep]
    return tx, rx


def simulate_picks(
    site: Site,
    nodes: Nodes,
    truth: TruthModel,
    *,
    both_directions: bool = True,
    max_distance_m: float | None = None,
    rays: str = "bent",
    executor=None,
    progress=None,
) -> SimulatedSurvey:
    """Simulate a survey in which every node transmits and all others listen.

    ``rays="bent"`` (default) gives true first arrivals: eikonal travel-time
    fields over the refined truth grid, air included, so that air waves over
    the ground and rays drawn into fast voids arrive first as they would in
    the field. ``rays="straight"`` integrates slowness along straight lines
    (faster; for tests of the straight-ray inversion only).
    """
    fine = refined_grid(site.grid(), truth.refine)
    check_grid_fits_memory(fine, source=truth.source, key="refine")
    ground = ground_mask(fine, site.ground.elevation_m)
    placement = place_nodes(nodes, fine, ground)
    xyz = placement.xyz_m
    velocity = truth_velocity(truth, fine, ground, site.rock.velocity_m_per_ns)
    tx, rx = all_pairs(len(nodes), both_directions=both_directions, xyz_m=xyz, max_distance_m=max_distance_m)
    if progress:
        progress(f"simulating {tx.size:,} picks on a {fine.shape[0]} x {fine.shape[1]} x {fine.shape[2]} grid")
    if rays == "straight":
        G = straight_ray_matrix(fine, xyz[tx], xyz[rx],
                                progress=(lambda d, n: progress(f"straight rays: {d:,}/{n:,}")) if progress else None)
        travel = G @ (1.0 / velocity).ravel()
    elif rays == "bent":
        from reconstruct.forward.first_arrivals import first_arrival_times, unique_pairs
        from reconstruct.parallel import Executor

        from reconstruct.forward.eikonal import EikonalOptions
        from reconstruct.forward.kernels import COMPILING_MESSAGE, kernels_need_compiling

        if progress and kernels_need_compiling():
            progress(COMPILING_MESSAGE)
        pair_a, pair_b, pick_pair = unique_pairs(tx, rx)
        # the inversion's own forward model and treatment of fast cells and
        # air: EikonalOptions' defaults (see its fast_bodies for the figures)
        pair_times = first_arrival_times(
            fine, 1.0 / velocity, xyz, pair_a, pair_b, eikonal_options=EikonalOptions(),
            executor=executor if executor is not None else Executor(kind="processes"),
            progress=(lambda d, n: progress(f"travel-time fields: {d}/{n}")) if progress else None)
        travel = pair_times[pick_pair]
    else:
        raise ValueError(f"rays must be 'bent' or 'straight' (got {rays!r})")
    rng = np.random.default_rng(truth.seed)
    offsets = (rng.normal(0.0, truth.time_zero_sigma_ns, len(nodes)) if truth.time_zero_sigma_ns > 0
               else np.zeros(len(nodes)))
    offsets -= offsets.mean()
    noise = rng.normal(0.0, truth.noise_sigma_ns, tx.size) if truth.noise_sigma_ns > 0 else np.zeros(tx.size)
    time_ns = travel + offsets[rx] - offsets[tx] + noise
    shot_s = tx * float(truth.shot_interval_s)
    drift = _clock_drifts(truth, len(nodes))
    if drift.any():
        from reconstruct.inverse.time_zero import time_zero_matrix

        time_ns = time_ns + time_zero_matrix(tx, rx, len(nodes), "clock_drift", shot_s) @ np.r_[
            np.zeros(len(nodes)), drift]
    error = gross_errors(time_ns, truth.outlier_fraction, truth.outlier_size_ns, seed=truth.seed)
    time_ns = time_ns + error
    sigma = np.full(tx.size, max(truth.noise_sigma_ns, 0.01))
    return SimulatedSurvey(tx, rx, time_ns, sigma, travel, offsets, xyz, error, shot_s, drift)


def _clock_drifts(truth: TruthModel, n_nodes: int) -> np.ndarray:
    """The nodes' true clock drifts (ns per hour, mean zero), from a random stream of their own."""
    if truth.clock_drift_sigma_ns_per_h <= 0:
        return np.zeros(n_nodes)
    drift = np.random.default_rng([truth.seed, 1]).normal(0.0, truth.clock_drift_sigma_ns_per_h, n_nodes)
    return drift - drift.mean()


def gross_errors(time_ns, fraction: float, size_ns: float, *, seed: int) -> np.ndarray:
    """Errors that turn a seeded share of picks into gross outliers (see module notes).

    Returns an array like ``time_ns``: 0 for good picks, the added error (ns) for outliers.
    """
    time_ns = np.asarray(time_ns, dtype=float)
    error = np.zeros_like(time_ns)
    n_out = int(round(fraction * time_ns.size))
    if n_out == 0:
        return error
    rng = np.random.default_rng([seed, 0x0517])  # a stream of its own
    which = rng.choice(time_ns.size, size=n_out, replace=False)
    size = rng.uniform(0.5, 1.5, n_out) * size_ns
    sign = rng.choice([-1.0, 1.0], n_out)
    sign[time_ns[which] - size <= 2.0] = 1.0
    error[which] = sign * size
    return error


def drop_missed_picks(survey: SimulatedSurvey, margin_db, *, fade_sigma_db: float = 0.0, seed: int = 0):
    """Leave out the picks whose link margin falls below 0 dB (not heard).

    Parameters
    ----------
    survey : SimulatedSurvey
    margin_db : array, shape (n_picks,)
        Link-budget margin of each pick's pair (:mod:`plan.radio.link_budget`).
    fade_sigma_db : float
        Standard deviation of a Gaussian fade in dB added to every margin
        (seeded; 0 keeps the budget's verdict as it is).
    seed : int

    Returns
    -------
    survey : SimulatedSurvey
        The picks still heard (node arrays unchanged).
    missed : numpy.ndarray of bool, shape (n_picks,)
        True for the picks left out.
    """
    margin = np.asarray(margin_db, dtype=float)
    if margin.shape != survey.tx.shape:
        raise ValueError(f"margin_db has shape {margin.shape}, expected {survey.tx.shape}")
    if fade_sigma_db > 0:
        margin = margin + np.random.default_rng(seed).normal(0.0, fade_sigma_db, margin.size)
    missed = margin < 0.0
    keep = ~missed
    error = None if survey.outlier_error_ns is None else survey.outlier_error_ns[keep]
    shot = None if survey.shot_time_s is None else survey.shot_time_s[keep]
    return SimulatedSurvey(survey.tx[keep], survey.rx[keep], survey.time_ns[keep], survey.sigma_ns[keep],
                           survey.true_travel_time_ns[keep], survey.time_zero_ns, survey.node_xyz_m,
                           error, shot, survey.clock_drift_ns_per_h), missed
