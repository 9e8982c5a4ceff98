"""Pick checks: flags on every first-arrival pick before an inversion.

:func:`check_picks` looks at every pick and every node before any model is
fitted, and returns a :class:`PickChecks` with flags per pick and estimates per
node. Nothing is changed in the pick table: :func:`picks_for_inversion` makes
a new selection and lists every pick it leaves out with the reason.

Rules (docs/processing.md, "Pick checks", says the same)
--------------------------------------------------------
Clock model. Cheap nodes keep their own clocks; a pick from ``a`` to ``b`` reads
``t_ab = T_ab + R_b - X_a`` with ``X`` the node's time-zero as transmitter and
``R`` as receiver. Writing ``R = tau + eta`` and ``X = tau - eta``:

- reciprocal differences ``(t_ab - t_ba) / 2 = tau_b - tau_a`` do not depend
  on the travel time at all, so they fix the clock terms ``tau``;
- single picks ``t_ab - d_ab / v = tau_b - tau_a + eta_a + eta_b`` (``v`` the
  site's rock velocity) add the part ``eta`` that differs between transmitting
  and receiving. These rows carry the uncertainty of the straight-path time
  through rock of unknown velocity, taken as 10 % of ``d / v``, so short
  direct paths weigh most. Only picks whose raw time lies within a factor 1.25
  of ``d / v`` are used (air waves and gross errors would bias the clocks).
  Both ``tx`` and ``rx`` time-zeros therefore depend on the rock near the
  node: a node inside a fast or slow zone shows a shift of its ``eta``.

Weak priors (clock 10 ns, half transmit/receive difference 2 ns, about 0)
keep a node with few picks from soaking up their residuals. Both sets of
rows go into one weighted least-squares fit
(:func:`reconstruct.inverse.time_zero.estimate_time_zero` over the matrices of
:func:`reconstruct.inverse.time_zero.time_zero_matrix`, "clock" for ``tau`` and
"delay" for ``eta``), reweighted with Huber's weights against gross errors
(:func:`reconstruct.inverse.time_zero.robust_time_zero`). ``tau`` is reported relative
to its mean over the nodes, like the inversion's time-zeros, which stay
unknowns of the inversion.

Names in the outputs (docs/glossary.md): a node's ``time_zero_ns`` is
``tau`` (the ``clock`` model's time-zero offset) and its ``delay_ns`` is
``eta`` (the ``delay`` model's term, half its receiving minus its
transmitting time-zero); a pick's ``time_zero_correction_ns`` is
``tau_rx - tau_tx``, the part of its pick time the clock terms explain,
and ``corrected_time_ns`` is ``time_ns`` less it.

Pick noise. The time-zero corrected reciprocal error is
``e_ab = (t_ab - t_ba) - 2 (tau_b - tau_a)``; with independent picks of equal
noise its standard deviation is ``sqrt(2) sigma``, so the pick noise is
estimated as ``1.4826 * median(|e|) / sqrt(2)`` (normalised median absolute
deviation: robust to a few bad pairs). It is the sigma of every pick when the
table has no ``sigma_ns`` column (at least 10 reciprocal pairs needed;
otherwise the default sigma is used and said so).

Flags (a pick can carry several):

``reciprocal_mismatch``
    ``|e_ab| > 4 sqrt(sigma_a^2 + sigma_b^2)``: the two picks of the pair
    disagree beyond noise. The pick that also disagrees with its neighbours
    (same transmitter at nearby receivers, same receiver from nearby
    transmitters; :mod:`reconstruct.checks.neighbours`) is flagged, both when
    both do or neither can be told; flagged picks stay in the inversion for
    the robust weights. Pairs that agree are combined for the report as the
    reciprocal mean ``(t_ab + t_ba) / 2``, which is free of the clock terms.
``faster_than_air``
    the time-zero corrected time is shorter than the straight distance at the
    speed of light by more than 3 sigma: impossible, excluded.
``slower_than_band``
    apparent velocity below the band's lowest velocity (0.03 m/ns, just under
    fresh water, 0.033 m/ns; Davis and Annan, 1989) by more than 3 sigma:
    implausible for a first arrival, excluded.
``air_direct``
    both nodes at the ground surface (depth at most the larger of 0.5 m and
    one cell) and the time within tolerance of ``d / c``.
``air_refracted``
    the time within tolerance of the refracted air wave: up to the ground
    surface at the critical angle, along it at ``c``, and down,
    ``t = s / c + (h_a + h_b) sqrt(1 / v^2 - 1 / c^2)`` (``h`` depths below the
    ground surface straight above each node, ``s`` the distance between those
    surface points; the head-wave formula with the fast medium above), where
    that path exists (``s >= (h_a + h_b) tan(theta_c)``, ``sin(theta_c) = v / c``).

Air-wave flags need the air-wave time to be shorter than the straight path
through rock at the site's velocity by more than twice the tolerance (the air
wave comes first and the two can be told apart), and the pick to lie within
the tolerance ``max(3 sigma, 2 %)`` of the air-wave time and closer to it than
to the rock time. Nodes of kind ``face`` stand
on a bench face, in contact with the air: their depth is taken as 0 and their
surface point is the node itself. With straight rays the air-wave picks are
excluded from the rock inversion; with bent rays they are kept (the air is in
the forward model).

Reference model. The residual of a pick is taken against the straight path
through a homogeneous rock (air segments at ``c``) whose slowness is the median
over the plausible picks, those between two buried nodes when there are at
least 20 (near the surface an unrecognised air wave makes the rock look fast),
or against the air-wave time for air-wave picks.

Nodes. :func:`reconstruct.checks.nodes.check_nodes` finds the nodes whose
picks are off as a group, with the likely cause in words.

Usability. :func:`usability_problems` lists reasons to refuse an inversion:
more than 1 % of the picks outside the velocity band, more than 10 % of the
reciprocal pairs mismatched, a pick noise from reciprocity more than three
times the table's median ``sigma_ns``, or more than half of the picks from
nodes off as a group. :func:`usability_cautions` lists reasons for caution:
more than 2 % of the picks flagged as errors, more than 20 % flagged at all,
any node off as a group. :func:`verdict` puts them in words: "not usable as
it stands", "usable with caution" or "usable". These thresholds are our
choices (common practice, no published source).

References
----------
.. [1] Davis, J. L. and Annan, A. P. (1989), Ground-penetrating radar for
   high-resolution mapping of soil and rock stratigraphy, Geophysical
   Prospecting 37(5), 531-551 (air 0.30 m/ns, fresh water 0.033 m/ns).
.. [2] Telford, W. M., Geldart, L. P. and Sheriff, R. E. (1990), Applied
   Geophysics, 2nd ed., Cambridge University Press (head waves along an
   interface; here the fast medium, air, is above).
.. [3] Huber, P. J. (1964), Robust estimation of a location parameter, Annals
   of Mathematical Statistics 35(1), 73-101.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from reconstruct.errors import InputError
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.inverse.time_zero import time_zero_matrix
from reconstruct.inverse.robust import MAD_TO_SIGMA
from reconstruct.checks.neighbours import blame_pairs, neighbour_levels, neighbour_scores
from reconstruct.checks.nodes import NEAR_AIR_M, NodeChecks, check_nodes, distance_to_air_m
from reconstruct.inverse.time_zero import robust_time_zero
from reconstruct.io.tables import ExcludedPick, Nodes, Picks

__all__ = [
    "PickCheckOptions",
    "PickChecks",
    "check_picks",
    "picks_for_inversion",
    "usability_problems",
    "usability_cautions",
    "verdict",
    "error_flagged",
    "off_node_picks",
    "excluded_flags",
    "kept_by_flags",
    "reciprocal_confirmed",
    "check_site_picks",
    "straight_air_fraction",
    "reciprocal_partner",
    "air_wave_times",
    "FLAGS",
    "FLAG_RECIPROCAL",
    "FLAG_FASTER_THAN_AIR",
    "FLAG_SLOWER_THAN_BAND",
    "FLAG_AIR_DIRECT",
    "FLAG_AIR_REFRACTED",
]

FLAG_RECIPROCAL = "reciprocal_mismatch"
FLAG_FASTER_THAN_AIR = "faster_than_air"
FLAG_SLOWER_THAN_BAND = "slower_than_band"
FLAG_AIR_DIRECT = "air_direct"
FLAG_AIR_REFRACTED = "air_refracted"
FLAGS = (FLAG_RECIPROCAL, FLAG_FASTER_THAN_AIR, FLAG_SLOWER_THAN_BAND, FLAG_AIR_DIRECT, FLAG_AIR_REFRACTED)

#: Why a flagged pick is left out of an inversion (flags not listed are kept).
EXCLUSION_REASONS = {
    FLAG_FASTER_THAN_AIR: "pick checks: faster than air (apparent velocity above c after the time-zero correction)",
    FLAG_SLOWER_THAN_BAND: "pick checks: slower than the velocity band (apparent velocity below the band minimum)",
    FLAG_AIR_DIRECT: "pick checks: direct air wave (straight rays cannot model it)",
    FLAG_AIR_REFRACTED: "pick checks: refracted air wave along the ground surface (straight rays cannot model it)",
}
_AIR_FLAGS = (FLAG_AIR_DIRECT, FLAG_AIR_REFRACTED)
#: Flags that mark a pick as wrong (the others say what kind of arrival it is).
_ERROR_FLAGS = frozenset((FLAG_RECIPROCAL, FLAG_FASTER_THAN_AIR, FLAG_SLOWER_THAN_BAND))
_MIN_RECIPROCAL_PAIRS = 10
#: The reference rock velocity is fitted to the picks between buried nodes when there are at least this many.
_MIN_BURIED_FIT_PICKS = 20
#: Prior standard deviations of a node's clock term and of half its transmit/receive difference, ns.
_CLOCK_PRIOR_NS = 10.0
_DELAY_PRIOR_NS = 2.0


@dataclass(frozen=True)
class PickCheckOptions:
    """Thresholds of the pick checks (see the module notes).

    Parameters
    ----------
    velocity_min_m_per_ns, velocity_max_m_per_ns : float
        Plausible apparent velocities; above ``c`` nothing can travel.
    band_sigmas : float
        Tolerance of the band and air-wave checks, in pick sigmas.
    reciprocal_sigmas : float
        A reciprocal pair mismatches beyond this many standard deviations of
        its difference.
    air_tolerance_fraction : float
        Relative tolerance of the air-wave times (their geometry is approximate).
    velocity_uncertainty_fraction : float
        Relative uncertainty of the straight-path time through rock, used to
        weight single picks in the clock estimate.
    default_sigma_ns : float
        Pick sigma when the table has none and reciprocity cannot give one.
    max_implausible_fraction, max_mismatch_fraction, max_noise_ratio, max_off_node_fraction : float
        Limits beyond which :func:`usability_problems` refuses the data.
    caution_error_fraction, caution_flagged_fraction : float
        Shares of the picks flagged as errors, and flagged at all, beyond which
        :func:`usability_cautions` says to use the data with caution.
    neighbours : int
        Neighbours of a pick on each side (same transmitter, same receiver),
        :mod:`reconstruct.checks.neighbours`.
    blame_score, node_score : float
        Robust scores beyond which a pick disagrees with its neighbours, and a
        node's picks are off as a group (:mod:`reconstruct.checks.nodes`).
    """

    velocity_min_m_per_ns: float = 0.03
    velocity_max_m_per_ns: float = 0.30
    band_sigmas: float = 3.0
    reciprocal_sigmas: float = 4.0
    air_tolerance_fraction: float = 0.02
    velocity_uncertainty_fraction: float = 0.10
    default_sigma_ns: float = 1.0
    max_implausible_fraction: float = 0.01
    max_mismatch_fraction: float = 0.10
    max_noise_ratio: float = 3.0
    max_off_node_fraction: float = 0.5
    caution_error_fraction: float = 0.02
    caution_flagged_fraction: float = 0.20
    neighbours: int = 6
    blame_score: float = 3.5
    node_score: float = 3.5

    def __post_init__(self):
        problems = []
        if not 0 < self.velocity_min_m_per_ns < self.velocity_max_m_per_ns:
            problems.append("velocity band must satisfy 0 < min < max")
        if not (isinstance(self.neighbours, (int, np.integer)) and self.neighbours >= 1):
            problems.append(f"neighbours must be a whole number >= 1 (got {self.neighbours})")
        for name in ("band_sigmas", "reciprocal_sigmas", "default_sigma_ns", "max_noise_ratio", "blame_score",
                     "node_score"):
            if not getattr(self, name) > 0:
                problems.append(f"{name} must be > 0 (got {getattr(self, name)})")
        for name in ("air_tolerance_fraction", "velocity_uncertainty_fraction", "max_implausible_fraction",
                     "max_mismatch_fraction", "max_off_node_fraction", "caution_error_fraction",
                     "caution_flagged_fraction"):
            if not 0 <= getattr(self, name) <= 1:
                problems.append(f"{name} must be between 0 and 1 (got {getattr(self, name)})")
        if problems:
            raise InputError(problems, source="pick check options")


@dataclass(frozen=True)
class PickChecks:
    """What :func:`check_picks` found. Arrays over picks follow the order of the
    :class:`~reconstruct.io.tables.Picks` checked; arrays over nodes that of the
    :class:`~reconstruct.io.tables.Nodes`.
    """

    # per pick
    distance_m: np.ndarray
    sigma_ns: np.ndarray  # the sigma used: from the table, from reciprocity or the default
    time_zero_correction_ns: np.ndarray  # time_zero_ns[rx] - time_zero_ns[tx], subtracted from the pick time
    corrected_time_ns: np.ndarray  # time_ns - time_zero_correction_ns
    apparent_velocity_m_per_ns: np.ndarray  # distance / corrected time
    reciprocal: np.ndarray  # index of the reverse pick, -1 when none
    reciprocal_error_ns: np.ndarray  # time-zero corrected t_ab - t_ba (NaN without a partner)
    reciprocal_mean_ns: np.ndarray  # (t_ab + t_ba) / 2 for agreeing pairs, else NaN
    air_time_ns: np.ndarray  # travel time of the air wave (direct or refracted), NaN where none
    reference_time_ns: np.ndarray  # travel time of the reference: air wave when flagged, else d * slowness_fit
    residual_ns: np.ndarray  # corrected time minus reference time
    neighbour_residual_ns: np.ndarray  # median residual of the pick's neighbours (NaN: too few)
    neighbour_score: np.ndarray  # |residual - neighbours' median| / max(neighbours' MAD sigma, pick sigma)
    pair_mismatch: np.ndarray  # the pick's reciprocal pair disagrees (whichever pick is flagged)
    flags: tuple  # tuple of tuples of flag names
    # per node
    time_zero_ns: np.ndarray  # tau: the clock term, relative to its mean over the nodes with picks (NaN: no pick)
    delay_ns: np.ndarray  # eta: the delay term, half the node's receiving minus transmitting time-zero
    depth_m: np.ndarray
    nodes: NodeChecks  # nodes whose picks are off as a group
    # overall
    sigma_source: str  # "table", "reciprocity" or "default"
    noise_sigma_ns: float | None  # pick noise from reciprocity (None: too few pairs)
    n_reciprocal_pairs: int
    reciprocity: dict
    fitted_velocity_m_per_ns: float
    rock_velocity_m_per_ns: float
    options: PickCheckOptions

    def has(self, flag: str) -> np.ndarray:
        """Boolean mask of the picks carrying ``flag``."""
        return np.array([flag in f for f in self.flags], dtype=bool)

    def counts(self) -> dict:
        return {flag: int(self.has(flag).sum()) for flag in FLAGS}


def reciprocal_partner(tx, rx, n_nodes: int) -> np.ndarray:
    """Index of the pick ``rx -> tx`` for every pick ``tx -> rx``, -1 when absent.

    Assumes each ordered pair occurs once (the pick reader refuses repeats).
    """
    tx = np.asarray(tx, dtype=np.int64)
    rx = np.asarray(rx, dtype=np.int64)
    code = tx * n_nodes + rx
    order = np.argsort(code, kind="stable")
    reverse = rx * n_nodes + tx
    pos = np.searchsorted(code[order], reverse)
    pos = np.minimum(pos, max(code.size - 1, 0))
    found = code[order][pos] == reverse if code.size else np.zeros(0, dtype=bool)
    return np.where(found, order[pos], -1)


def air_wave_times(xyz_m, depth_m, tx, rx, rock_velocity_m_per_ns: float):
    """Air-wave travel times of picks: direct (``d / c``) and refracted.

    Parameters
    ----------
    xyz_m : ndarray, shape (n_nodes, 3)
        Node positions, metres.
    depth_m : ndarray, shape (n_nodes,)
        Depth of each node below the ground surface straight above it, metres (>= 0).
    tx, rx : ndarray of int, shape (m,)
    rock_velocity_m_per_ns : float

    Returns
    -------
    direct_ns, refracted_ns : ndarray, shape (m,)
        ``refracted_ns`` is NaN where the critical-angle path does not exist.

    Notes
    -----
    Head wave with the fast medium (air, velocity ``c``) above:
    ``t = s / c + (h_a + h_b) sqrt(1 / v^2 - 1 / c^2)``, valid for
    ``s >= (h_a + h_b) tan(theta_c)``, ``sin(theta_c) = v / c``; ``s`` is the
    distance between the surface points above the two nodes (Telford, Geldart
    and Sheriff, 1990).
    """
    c = AIR_VELOCITY_M_PER_NS
    v = float(rock_velocity_m_per_ns)
    xyz = np.asarray(xyz_m, dtype=float)
    h = np.asarray(depth_m, dtype=float)
    surface = xyz + np.c_[np.zeros((h.size, 2)), h]
    direct = np.linalg.norm(xyz[rx] - xyz[tx], axis=1) / c
    s = np.linalg.norm(surface[rx] - surface[tx], axis=1)
    depth_sum = h[tx] + h[rx]
    if v >= c:
        return direct, np.full(direct.shape, np.nan)
    tan_critical = v / np.sqrt(c * c - v * v)
    refracted = s / c + depth_sum * np.sqrt(1.0 / v**2 - 1.0 / c**2)
    refracted = np.where(s >= depth_sum * tan_critical, refracted, np.nan)
    return direct, refracted


def straight_air_fraction(xyz_m, tx, rx, ground_elevation_m, *, samples: int = 32) -> np.ndarray:
    """Share of each straight node-to-node segment that runs above the ground surface.

    Sampled at ``samples`` evenly spaced midpoints of the segment (a bench
    face between the nodes puts part of the line in the air).
    """
    xyz = np.asarray(xyz_m, dtype=float)
    a, b = xyz[tx], xyz[rx]
    fractions = (np.arange(samples) + 0.5) / samples
    share = np.zeros(a.shape[0])
    for f in fractions:
        p = a + f * (b - a)
        share += p[:, 2] > np.asarray(ground_elevation_m(p[:, 0], p[:, 1]), dtype=float)
    return share / samples


def _node_depths(nodes: Nodes, xyz_m, ground_elevation_m) -> np.ndarray:
    xyz = np.asarray(xyz_m, dtype=float)
    surface_z = np.asarray(ground_elevation_m(xyz[:, 0], xyz[:, 1]), dtype=float)
    depth = np.maximum(surface_z - xyz[:, 2], 0.0)
    face = np.array([k == "face" for k in nodes.kinds], dtype=bool)
    depth[face] = 0.0
    return depth


def _fit_clocks(tx, rx, time_ns, travel_ns, sigma, partner, n_nodes, velocity_fraction):
    """Robust joint fit of ``tau`` (clock) and ``eta`` (half the transmit/receive difference)."""
    m = tx.size
    first = np.flatnonzero((partner >= 0) & (np.arange(m) < partner))
    second = partner[first]
    C_clock = time_zero_matrix(tx, rx, n_nodes, "clock")
    C_delay = time_zero_matrix(tx, rx, n_nodes, "delay")
    # reciprocal rows: (t_ab - t_ba) / 2 = tau_b - tau_a
    rec_C = sp.hstack([C_clock[first], sp.csr_matrix((first.size, n_nodes))])
    rec_r = 0.5 * (time_ns[first] - time_ns[second])
    rec_w = 2.0 / np.sqrt(sigma[first] ** 2 + sigma[second] ** 2)
    # single picks: t - d / v = tau_b - tau_a + eta_a + eta_b, only those whose raw
    # apparent velocity is within a factor 1.25 of the rock's (not air waves or gross errors)
    rockish = (time_ns > travel_ns / 1.25) & (time_ns < travel_ns * 1.25)
    pick_C = sp.hstack([C_clock, C_delay])[rockish]
    pick_r = (time_ns - travel_ns)[rockish]
    pick_w = 1.0 / np.sqrt(sigma[rockish] ** 2 + (velocity_fraction * travel_ns[rockish]) ** 2)
    # priors: tau and eta about 0 within a few ns, so that a node with few picks
    # does not soak up their residuals (they matter only where data are scarce)
    prior_C = sp.identity(2 * n_nodes, format="csr")
    prior_w = np.r_[np.full(n_nodes, 1.0 / _CLOCK_PRIOR_NS), np.full(n_nodes, 1.0 / _DELAY_PRIOR_NS)]
    C = sp.vstack([rec_C, pick_C, prior_C]).tocsr()
    weight = np.r_[rec_w, pick_w, prior_w]
    residual = np.r_[rec_r, pick_r, np.zeros(2 * n_nodes)]
    tau_eta, _ = robust_time_zero(C, weight, residual, loss="huber")
    tau, eta = tau_eta[:n_nodes].copy(), tau_eta[n_nodes:].copy()
    used = np.zeros(n_nodes, dtype=bool)
    used[tx] = True
    used[rx] = True
    if used.any():
        tau[used] -= tau[used].mean()
    return tau, eta, used, first, second


def check_picks(nodes: Nodes, picks: Picks, xyz_m, ground_elevation_m, rock_velocity_m_per_ns: float, *,
                cell_m=(1.0, 1.0, 1.0), options: PickCheckOptions = PickCheckOptions()) -> PickChecks:
    """Check every pick against reciprocity, node time-zero offsets, the velocity band and air waves.

    Long because the checks run in a fixed order, each on the flags of the ones
    before; kept whole while the pick-check vocabulary is being renamed.

    Parameters
    ----------
    nodes : Nodes
    picks : Picks
        The picks as read (the rows excluded on reading are not checked again).
    xyz_m : ndarray, shape (n_nodes, 3)
        Node positions used by the forward model (after snapping), metres.
    ground_elevation_m : callable
        ``f(x_m, y_m) -> z_m``, the site's ground surface.
    rock_velocity_m_per_ns : float
        The site's rock velocity, m/ns.
    cell_m : tuple of 3 float
        Model cell size; a node within one cell (or 0.5 m) of the surface counts as at the surface.
    options : PickCheckOptions

    Returns
    -------
    PickChecks
    """
    if len(picks) == 0:
        raise InputError(f"{picks.source}: no usable picks left to invert or check; every row was excluded "
                         "on reading (run reconstruct check to see why)")
    n_nodes = len(nodes)
    xyz = np.asarray(xyz_m, dtype=float)
    tx, rx = np.asarray(picks.tx), np.asarray(picks.rx)
    t = np.asarray(picks.time_ns, dtype=float)
    m = t.size
    v_rock = float(rock_velocity_m_per_ns)
    c = AIR_VELOCITY_M_PER_NS
    distance = np.linalg.norm(xyz[rx] - xyz[tx], axis=1)
    air_share = straight_air_fraction(xyz, tx, rx, ground_elevation_m)
    # straight path through the reference model: rock at the site's velocity, air at c
    rock_time = distance * ((1.0 - air_share) / v_rock + air_share / c)
    partner = reciprocal_partner(tx, rx, n_nodes)

    # clocks, first with the table's or the default sigma, then with the reciprocity estimate
    have_sigma = picks.sigma_ns is not None
    sigma = np.array(picks.sigma_ns, dtype=float) if have_sigma else np.full(m, options.default_sigma_ns)
    tau, eta, used, first, second = _fit_clocks(tx, rx, t, rock_time, sigma, partner, n_nodes,
                                                options.velocity_uncertainty_fraction)
    rec_error_pairs = (t[first] - t[second]) - 2.0 * (tau[rx[first]] - tau[tx[first]])
    noise = None
    if first.size >= _MIN_RECIPROCAL_PAIRS:
        noise = float(MAD_TO_SIGMA * np.median(np.abs(rec_error_pairs)) / np.sqrt(2.0))
        noise = max(noise, 1e-3)
    if have_sigma:
        source = "table"
    elif noise is not None:
        source = "reciprocity"
        sigma = np.full(m, noise)
        tau, eta, used, first, second = _fit_clocks(tx, rx, t, rock_time, sigma, partner, n_nodes,
                                                    options.velocity_uncertainty_fraction)
        rec_error_pairs = (t[first] - t[second]) - 2.0 * (tau[rx[first]] - tau[tx[first]])
    else:
        source = "default"

    correction = tau[rx] - tau[tx]
    corrected = t - correction
    with np.errstate(divide="ignore"):
        apparent = np.where(corrected > 0, distance / np.maximum(corrected, 1e-300), np.inf)
    flags = [[] for _ in range(m)]

    # velocity band (with a tolerance of band_sigmas pick sigmas)
    tol = options.band_sigmas * sigma
    v_max = min(options.velocity_max_m_per_ns, c)
    apart = distance > 1e-6  # picks between nodes at one position are left to the inversion's own rule
    too_fast = apart & (corrected < distance / v_max - tol)
    too_slow = apart & (corrected > distance / options.velocity_min_m_per_ns + tol)
    for k in np.flatnonzero(too_fast):
        flags[k].append(FLAG_FASTER_THAN_AIR)
    for k in np.flatnonzero(too_slow):
        flags[k].append(FLAG_SLOWER_THAN_BAND)

    # air waves
    depth = _node_depths(nodes, xyz, ground_elevation_m)
    at_surface = depth <= max(0.5, float(np.max(cell_m)))
    direct, refracted = air_wave_times(xyz, depth, tx, rx, v_rock)
    both_surface = at_surface[tx] & at_surface[rx]
    air = np.where(both_surface, direct, refracted)
    air_tol = np.maximum(tol, options.air_tolerance_fraction * np.nan_to_num(air))
    air_first = apart & np.isfinite(air) & (air < rock_time)
    # only where the air wave is clearly earlier than the path through rock can the two be told apart
    separable = air_first & (rock_time - np.nan_to_num(air) > 2.0 * air_tol)
    gap_air = np.abs(corrected - np.nan_to_num(air))
    on_air = separable & (gap_air <= air_tol) & (gap_air < np.abs(corrected - rock_time)) & ~too_fast
    for k in np.flatnonzero(on_air):
        flags[k].append(FLAG_AIR_DIRECT if both_surface[k] else FLAG_AIR_REFRACTED)

    # reference: air wave where flagged, else a homogeneous rock fitted to the plausible picks
    rock_like = ~(on_air | too_fast | too_slow) & (distance > 0)
    rock_length = distance * (1.0 - air_share)
    fit_rows = rock_like & (rock_length > 0.5 * distance)
    # picks between two buried nodes, where enough: near the surface an air wave the checks
    # cannot tell from the rock wave (benches, uneven ground) would make the rock look fast
    buried = fit_rows & ~at_surface[tx] & ~at_surface[rx]
    if buried.sum() >= _MIN_BURIED_FIT_PICKS:
        fit_rows = buried
    slowness_fit = (float(np.median((corrected[fit_rows] - distance[fit_rows] * air_share[fit_rows] / c)
                                     / rock_length[fit_rows])) if fit_rows.any() else 1 / v_rock)
    reference = np.where(on_air, np.nan_to_num(air), rock_length * slowness_fit + distance * air_share / c)
    residual = corrected - reference

    # reciprocity: of a mismatched pair, flag the pick that disagrees with its neighbours
    rec_error = np.full(m, np.nan)
    rec_error[first] = rec_error_pairs
    rec_error[second] = -rec_error_pairs
    pair_sigma = np.sqrt(sigma[first] ** 2 + sigma[second] ** 2)
    mismatch = np.abs(rec_error_pairs) > options.reciprocal_sigmas * pair_sigma
    rec_mean = np.full(m, np.nan)
    agree_mean = 0.5 * (t[first] + t[second])
    rec_mean[first[~mismatch]] = agree_mean[~mismatch]
    rec_mean[second[~mismatch]] = agree_mean[~mismatch]
    pair_mismatch = np.zeros(m, dtype=bool)
    pair_mismatch[first[mismatch]] = True
    pair_mismatch[second[mismatch]] = True
    level, spread = neighbour_levels(tx, rx, xyz, residual, count=options.neighbours)
    score = neighbour_scores(residual, sigma, level, spread)
    blame_a, blame_b = blame_pairs(first[mismatch], second[mismatch], score, cut=options.blame_score)
    for k in np.r_[first[mismatch][blame_a], second[mismatch][blame_b]]:
        flags[k].append(FLAG_RECIPROCAL)
    flags = [sorted(f, key=FLAGS.index) for f in flags]
    errors = np.array([bool(_ERROR_FLAGS.intersection(f)) for f in flags], dtype=bool)
    near_air = (distance_to_air_m(xyz, ground_elevation_m) <= NEAR_AIR_M) | at_surface
    node_checks = check_nodes(tx, rx, xyz, residual, ~errors, sigma, near_air,
                              velocity_m_per_ns=1.0 / slowness_fit, cut=options.node_score)
    node_checks = dataclasses.replace(node_checks, ids=tuple(nodes.ids))

    reciprocity = {
        "pairs": int(first.size),
        "mismatched_pairs": int(mismatch.sum()),
        "mismatched_pairs_both_flagged": int((blame_a & blame_b).sum()),
        "mismatch_threshold_sigmas": options.reciprocal_sigmas,
        "raw_difference_ns": _stats(t[first] - t[second]),
        "time_zero_corrected_error_ns": _stats(rec_error_pairs),
        "pick_noise_sigma_ns": noise,
        "rule": ("of a pair whose time-zero corrected difference exceeds the threshold, the pick that "
                 "disagrees with its neighbours (same transmitter, nearby receivers; same receiver, nearby "
                 "transmitters) is flagged reciprocal_mismatch, both when both disagree or neither can be "
                 "told; flagged picks stay in the inversion for the robust weights; pairs that agree are "
                 "combined as the reciprocal mean (t_ab + t_ba) / 2, free of clock terms"),
    }
    eta_used = np.where(used, eta, np.nan)
    tau_used = np.where(used, tau, np.nan)
    return PickChecks(
        distance_m=distance, sigma_ns=sigma, time_zero_correction_ns=correction, corrected_time_ns=corrected,
        apparent_velocity_m_per_ns=apparent, reciprocal=partner, reciprocal_error_ns=rec_error,
        reciprocal_mean_ns=rec_mean, air_time_ns=np.where(air_first, air, np.nan), reference_time_ns=reference,
        residual_ns=residual, neighbour_residual_ns=level, neighbour_score=score, pair_mismatch=pair_mismatch,
        flags=tuple(tuple(f) for f in flags),
        time_zero_ns=tau_used, delay_ns=eta_used,
        depth_m=depth, nodes=node_checks, sigma_source=source, noise_sigma_ns=noise, n_reciprocal_pairs=int(first.size),
        reciprocity=reciprocity, fitted_velocity_m_per_ns=1.0 / slowness_fit,
        rock_velocity_m_per_ns=v_rock, options=options,
    )


def _stats(values) -> dict:
    values = np.asarray(values, dtype=float)
    if values.size == 0:
        return {"count": 0}
    return {
        "count": int(values.size), "mean": float(values.mean()), "median": float(np.median(values)),
        "std": float(values.std()), "robust_sigma": float(MAD_TO_SIGMA * np.median(np.abs(values - np.median(values)))),
        "p05": float(np.percentile(values, 5)), "p95": float(np.percentile(values, 95)),
        "max_abs": float(np.max(np.abs(values))),
    }


def excluded_flags(rays: str, keep_flagged=()) -> tuple:
    """Flags that leave a pick out of an inversion with ``rays``, less those the user keeps."""
    flags = [FLAG_FASTER_THAN_AIR, FLAG_SLOWER_THAN_BAND]
    if rays == "straight":
        flags += list(_AIR_FLAGS)
    return tuple(f for f in flags if f not in set(keep_flagged))


def kept_by_flags(checks: PickChecks, *, rays: str = "straight", keep_flagged=()) -> np.ndarray:
    """Boolean mask of the picks that no excluding flag leaves out."""
    leave_out = set(excluded_flags(rays, keep_flagged))
    return np.array([not leave_out.intersection(f) for f in checks.flags], dtype=bool)


def picks_for_inversion(picks: Picks, nodes: Nodes, checks: PickChecks, *, rays: str = "straight",
                        keep_flagged=()) -> Picks:
    """The picks to invert: a new :class:`Picks`, the input left unchanged.

    Picks carrying an excluding flag (:func:`excluded_flags`) are left out and
    appended to ``excluded`` with their reason; ``sigma_ns`` is the sigma the
    checks used (from the table, from reciprocity or the default), so that an
    inversion weights the picks by it.
    """
    unknown = [f for f in keep_flagged if f not in FLAGS]
    if unknown:
        raise InputError(f"--keep-flagged: unknown flag {', '.join(unknown)}; use one of {', '.join(FLAGS)}")
    leave_out = excluded_flags(rays, keep_flagged)
    keep = kept_by_flags(checks, rays=rays, keep_flagged=keep_flagged)
    extra = []
    for k in np.flatnonzero(~keep):
        hit = [f for f in leave_out if f in checks.flags[k]]
        if hit:
            extra.append(ExcludedPick(line=int(picks.lines[k]), tx=nodes.ids[picks.tx[k]], rx=nodes.ids[picks.rx[k]],
                                      time_text=repr(float(picks.time_ns[k])), reason=EXCLUSION_REASONS[hit[0]]))
    with_sigma = dataclasses.replace(picks, sigma_ns=checks.sigma_ns) if checks.sigma_source != "default" else picks
    chosen = with_sigma.subset(keep)
    return dataclasses.replace(chosen, excluded=tuple(picks.excluded) + tuple(extra))


def check_site_picks(site, nodes: Nodes, picks: Picks, *, snap_tolerance_m=None, options: PickCheckOptions = PickCheckOptions()):
    """Place the nodes in the site's model and check the picks.

    Returns ``(placement, checks)``; see :func:`check_picks`.
    """
    from reconstruct.model.placement import place_nodes
    from reconstruct.io.site import model_grid

    grid, ground = model_grid(site)
    placement = place_nodes(nodes, grid, ground, snap_tolerance_m=snap_tolerance_m)
    checks = check_picks(nodes, picks, placement.xyz_m, site.ground.elevation_m, site.rock.velocity_m_per_ns,
                         cell_m=grid.cell_m, options=options)
    return placement, checks


def reciprocal_confirmed(checks: PickChecks) -> np.ndarray:
    """True for picks whose reciprocal pick exists and agrees (the pair does not mismatch).

    A picking error would not repeat in the other direction; a true travel-time
    anomaly (a void) does. Such picks keep full weight in a robust inversion.
    """
    return (checks.reciprocal >= 0) & ~checks.pair_mismatch


def usability_problems(picks: Picks, checks: PickChecks) -> list[str]:
    """Reasons why the picks are unusable as they stand (empty when usable).

    Each reason starts with the pick table's path.
    """
    o = checks.options
    m = len(picks)
    problems = []
    if m == 0:
        return [f"{picks.source}: no usable pick"]
    bad = checks.has(FLAG_FASTER_THAN_AIR) | checks.has(FLAG_SLOWER_THAN_BAND)
    if bad.sum() > o.max_implausible_fraction * m:
        lines = ", ".join(str(int(picks.lines[k])) for k in np.flatnonzero(bad)[:5])
        problems.append(
            f"{picks.source}: {int(bad.sum())} of {m} picks ({bad.mean():.1%}) have apparent velocities outside "
            f"{o.velocity_min_m_per_ns:g}-{o.velocity_max_m_per_ns:g} m/ns after the time-zero correction "
            f"(lines {lines}{', ...' if bad.sum() > 5 else ''}); check the time unit (ns), the time-zero and "
            "the node coordinates")
    pairs = checks.n_reciprocal_pairs
    mism = checks.reciprocity["mismatched_pairs"]
    if pairs and mism > o.max_mismatch_fraction * pairs:
        problems.append(
            f"{picks.source}: {mism} of {pairs} reciprocal pairs ({mism / pairs:.1%}) disagree by more than "
            f"{o.reciprocal_sigmas:g} sigma after the time-zero correction; check the picking and the node ids")
    off = off_node_picks(picks, checks)
    if off.sum() > o.max_off_node_fraction * m:
        problems.append(
            f"{picks.source}: {int(off.sum())} of {m} picks ({off.mean():.1%}) involve nodes whose picks are off "
            f"as a group ({', '.join(_off_node_names(picks, checks))}); check the node positions, heights and "
            "clocks")
    if checks.sigma_source == "table" and checks.noise_sigma_ns is not None:
        typical = float(np.median(picks.sigma_ns))
        if checks.noise_sigma_ns > o.max_noise_ratio * typical:
            problems.append(
                f"{picks.source}: the pick noise from reciprocal pairs is {checks.noise_sigma_ns:.3g} ns, "
                f"{checks.noise_sigma_ns / typical:.1f} times the median sigma_ns {typical:.3g} ns; "
                "the sigmas are too small or the picks noisier than stated")
    return problems


def error_flagged(checks: PickChecks) -> np.ndarray:
    """Boolean mask of the picks flagged as errors (reciprocal_mismatch, faster_than_air, slower_than_band)."""
    return np.array([bool(_ERROR_FLAGS.intersection(f)) for f in checks.flags], dtype=bool)


def off_node_picks(picks: Picks, checks: PickChecks) -> np.ndarray:
    """Boolean mask of the picks sent or received by a node whose picks are off as a group."""
    off = checks.nodes.off
    return off[np.asarray(picks.tx)] | off[np.asarray(picks.rx)]


def _off_node_names(picks: Picks, checks: PickChecks, most: int = 8) -> list[str]:
    ids = checks.nodes.ids
    names = [ids[k] if k < len(ids) else str(k) for k in np.flatnonzero(checks.nodes.off)]
    return names[:most] + (["..."] if len(names) > most else [])


def usability_cautions(picks: Picks, checks: PickChecks) -> list[str]:
    """Reasons to use the picks with caution (empty when none); each starts with the pick table's path.

    Thresholds (:class:`PickCheckOptions`; our choices, common practice, no
    published source): more than 2 % of the picks flagged as errors (careful
    picking leaves about 1 to 2 % gross errors); more than 20 % of the picks
    flagged at all (air waves included: they tell little about the rock under
    the nodes, and a straight-ray inversion leaves them out); any node whose
    picks are off as a group.
    """
    o = checks.options
    m = len(picks)
    if m == 0:
        return []
    cautions = []
    errors = error_flagged(checks)
    if errors.sum() > o.caution_error_fraction * m:
        cautions.append(f"{picks.source}: {int(errors.sum())} of {m} picks ({errors.mean():.1%}) are flagged as "
                        f"errors, more than {o.caution_error_fraction:.0%}; look at the flagged picks")
    flagged = np.array([bool(f) for f in checks.flags], dtype=bool)
    if flagged.sum() > o.caution_flagged_fraction * m:
        counts = ", ".join(f"{n} {f}" for f, n in checks.counts().items() if n)
        cautions.append(f"{picks.source}: {int(flagged.sum())} of {m} picks ({flagged.mean():.1%}) are flagged "
                        f"({counts}), more than {o.caution_flagged_fraction:.0%}: the rock is sampled by fewer "
                        "picks than were taken")
    off = off_node_picks(picks, checks)
    if checks.nodes.off.any():
        cautions.append(f"{picks.source}: {int(checks.nodes.off.sum())} nodes have picks off as a group "
                        f"({', '.join(_off_node_names(picks, checks))}), {int(off.sum())} of {m} picks "
                        f"({off.mean():.1%}); see their likely causes in the node table")
    return cautions


def verdict(problems, cautions) -> str:
    """``"not usable as it stands"``, ``"usable with caution"`` or ``"usable"``."""
    if problems:
        return "not usable as it stands"
    return "usable with caution" if cautions else "usable"
