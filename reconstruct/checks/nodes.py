"""Checks per node: nodes whose picks are off as a group.

A node placed at the wrong position or height, with a clock or time-zero the
per-node correction could not take up, standing in the air, or badly coupled
to the rock makes all its picks early or late together. Each pick is
compared with the reference model of the pick checks (after the time-zero
correction); a node is judged by the median residual of its picks, against
the spread of the other nodes' medians.

Rules
-----
- A node's level ``m_n``: the median residual of its picks (as transmitter
  and as receiver), leaving out the picks flagged as errors
  (``reciprocal_mismatch``, ``faster_than_air``, ``slower_than_band``); judged
  with at least ``MIN_NODE_PICKS`` picks.
- Over the judged nodes, ``M = median(m_n)`` and ``S = 1.4826 MAD(m_n)``
  (normalised median absolute deviation, Rousseeuw and Croux [1]_).
- A node is off when ``|m_n - M| > cut * max(S, sigma)`` with ``cut = 3.5``
  (the modified z-score rule of Iglewicz and Hoaglin [2]_, from memory) and
  ``sigma`` the median pick sigma, so that a very even survey does not turn
  pick noise into a node problem (common practice, no published source).

The likely cause, in words, from the pattern of the node's residuals: the
residual of a pick between the node and another node ``o`` is fitted as
``c + u . g`` (``u`` the unit vector from ``o`` to the node; a node whose
true position is shifted by ``delta`` gives ``g = delta / v``, the distance
to every other node changing by ``u . delta``). When the direction term
explains at least half of the spread of the node's residuals and the shift
``v g`` is at least 0.5 m, the position or height is the likely cause;
otherwise a constant: early within 10 m of the air (the ground surface or a
bench face; :func:`distance_to_air_m`) points to air waves the checks could not tell apart (a node in the air, next to a bench
face) or a clock, late to a clock or time-zero or a bad coupling (a weak onset
picked late).

References
----------
.. [1] Rousseeuw, P. J. and Croux, C. (1993), Alternatives to the median
   absolute deviation, Journal of the American Statistical Association
   88(424), 1273-1283, doi:10.1080/01621459.1993.10476408.
.. [2] Iglewicz, B. and Hoaglin, D. C. (1993), How to Detect and Handle
   Outliers, ASQC Basic References in Quality Control 16, ASQC Quality Press
   (modified z-score beyond 3.5; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconstruct.inverse.robust import MAD_TO_SIGMA

__all__ = ["NodeChecks", "MIN_NODE_PICKS", "NEAR_AIR_M", "check_nodes", "node_cause", "distance_to_air_m"]

#: A node with fewer usable picks is not judged.
MIN_NODE_PICKS = 5
#: Share of a node's residual spread the direction term must explain to blame its position.
_DIRECTION_SHARE = 0.5
#: Smallest position shift, m, worth naming as the cause.
_MIN_SHIFT_M = 0.5
#: A node within this distance of the air (ground surface or bench face) may see air waves the
#: checks cannot tell from the rock wave; our choice (common practice, no published source).
NEAR_AIR_M = 10.0


def distance_to_air_m(xyz_m, ground_elevation_m, *, reach_m: float = 15.0, step_m: float = 0.5) -> np.ndarray:
    """Distance from every node to the air above the ground surface, up to ``reach_m``.

    The nearest air point at horizontal offset ``h`` lies at the node's own
    height or just above the ground there, so the distance is the least over
    offsets of ``sqrt(h^2 + max(g(x + dx, y + dy) - z, 0)^2)``, sampled every
    ``step_m`` along 24 directions; ``reach_m`` where no air is that near.
    Where the ground is not known (NaN, off the site) no air is assumed.
    """
    xyz = np.asarray(xyz_m, dtype=float)
    radii = np.arange(0.0, reach_m + 1e-9, step_m)
    angles = np.linspace(0.0, 2.0 * np.pi, 24, endpoint=False)
    dx = (radii[:, None] * np.cos(angles)[None, :]).ravel()
    dy = (radii[:, None] * np.sin(angles)[None, :]).ravel()
    x = xyz[:, 0:1] + dx[None, :]
    y = xyz[:, 1:2] + dy[None, :]
    g = np.asarray(ground_elevation_m(x.ravel(), y.ravel()), dtype=float).reshape(x.shape)
    h = np.hypot(dx, dy)[None, :]
    d = np.where(np.isfinite(g), np.hypot(h, np.maximum(g - xyz[:, 2:3], 0.0)), np.inf)  # NaN: off the site
    return np.minimum(d.min(axis=1), reach_m)


@dataclass(frozen=True)
class NodeChecks:
    """What :func:`check_nodes` found; arrays over the nodes of the node table."""

    median_residual_ns: np.ndarray  # median residual of the node's usable picks (NaN: none)
    picks: np.ndarray  # usable picks of the node (as transmitter or receiver)
    score: np.ndarray  # |m_n - M| / max(S, sigma) (NaN: not judged)
    off: np.ndarray  # the node's picks are off as a group
    shift_m: np.ndarray  # shape (n, 3): position shift that best explains the residuals (NaN: not fitted)
    direction_share: np.ndarray  # share of the residual spread the shift explains
    cause: tuple  # the likely cause in words ("" for nodes not off)
    level_ns: float  # M: median of the judged nodes' levels
    spread_ns: float  # S: 1.4826 MAD of the judged nodes' levels
    cut: float
    ids: tuple = ()  # node ids, for messages


def _direction_fit(residual, unit, velocity):
    """Least-squares ``c + u . g`` of one node's residuals: ``(shift_m, share explained)``."""
    if residual.size < 8:
        return np.full(3, np.nan), 0.0
    keep = np.abs(residual - np.median(residual)) <= 5.0 * max(
        MAD_TO_SIGMA * np.median(np.abs(residual - np.median(residual))), 1e-6) + 1e-9
    r, u = residual[keep], unit[keep]
    if r.size < 8:
        return np.full(3, np.nan), 0.0
    A = np.c_[np.ones(r.size), u]
    coef = np.linalg.lstsq(A, r, rcond=None)[0]
    spread = float(np.sum((r - r.mean()) ** 2))
    left = float(np.sum((r - A @ coef) ** 2))
    share = 1.0 - left / spread if spread > 0 else 0.0
    return coef[1:] * velocity, share


def node_cause(offset_ns: float, shift_m, direction_share: float, near_air: bool) -> str:
    """The likely cause of a node's group offset, in words (see the module notes)."""
    shift = np.asarray(shift_m, dtype=float)
    size = float(np.linalg.norm(shift)) if np.all(np.isfinite(shift)) else 0.0
    if direction_share >= _DIRECTION_SHARE and size >= _MIN_SHIFT_M:
        where = "height" if abs(shift[2]) >= np.hypot(shift[0], shift[1]) else "position"
        return (f"wrong {where}: the residuals follow the direction to the other nodes as for a node whose "
                f"true place is about {size:.1f} m from its coordinates (x {shift[0]:+.1f}, y {shift[1]:+.1f}, "
                f"z {shift[2]:+.1f} m)")
    if offset_ns < 0:
        if near_air:
            return ("early as a group: air waves the checks could not tell from the rock wave (a node in the "
                    "air or next to a bench face), or a clock or time-zero error")
        return ("early as a group: a clock or time-zero error, a wrong position or height, or a fast path the "
                "reference does not hold (air along a bench face, an air-filled void)")
    return ("late as a group: a clock or time-zero error, a bad coupling to the rock (a weak onset picked "
            "late), or a wrong position or height")


def check_nodes(tx, rx, xyz_m, residual_ns, usable, sigma_ns, near_air, *, velocity_m_per_ns: float,
                cut: float = 3.5) -> NodeChecks:
    """Nodes whose picks are off as a group (see the module notes).

    Parameters
    ----------
    tx, rx : ndarray of int, shape (m,)
    xyz_m : ndarray, shape (n_nodes, 3)
        Node positions, metres.
    residual_ns : ndarray, shape (m,)
        Residual of every pick against the reference model after the time-zero correction.
    usable : ndarray of bool, shape (m,)
        Picks that count (not flagged as errors).
    sigma_ns : ndarray, shape (m,)
        Pick uncertainties.
    near_air : ndarray of bool, shape (n_nodes,)
        Nodes within :data:`NEAR_AIR_M` of the air (ground surface or a bench face).
    velocity_m_per_ns : float
        Rock velocity of the reference, to turn the direction term into metres.
    cut : float
        Robust score beyond which a node is off.

    Returns
    -------
    NodeChecks
    """
    tx, rx = np.asarray(tx, dtype=np.int64), np.asarray(rx, dtype=np.int64)
    xyz = np.asarray(xyz_m, dtype=float)
    n = xyz.shape[0]
    r = np.asarray(residual_ns, dtype=float)
    ok = np.asarray(usable, dtype=bool) & np.isfinite(r)
    node = np.r_[tx[ok], rx[ok]]
    other = np.r_[rx[ok], tx[ok]]
    values = np.r_[r[ok], r[ok]]
    count = np.bincount(node, minlength=n)
    median = np.full(n, np.nan)
    groups = [np.flatnonzero(node == k) for k in range(n)]
    for k in range(n):
        if groups[k].size:
            median[k] = float(np.median(values[groups[k]]))
    judged = count >= MIN_NODE_PICKS
    level = float(np.median(median[judged])) if judged.any() else 0.0
    spread = float(MAD_TO_SIGMA * np.median(np.abs(median[judged] - level))) if judged.any() else 0.0
    floor = float(np.median(sigma_ns)) if np.size(sigma_ns) else 0.0
    score = np.where(judged, np.abs(median - level) / max(spread, floor, 1e-9), np.nan)
    off = judged & (np.nan_to_num(score) > cut)
    shift = np.full((n, 3), np.nan)
    share = np.zeros(n)
    causes = [""] * n
    for k in np.flatnonzero(off):
        g = groups[k]
        unit = xyz[k] - xyz[other[g]]
        unit /= np.maximum(np.linalg.norm(unit, axis=1, keepdims=True), 1e-9)
        shift[k], share[k] = _direction_fit(values[g] - level, unit, velocity_m_per_ns)
        causes[k] = node_cause(median[k] - level, shift[k], share[k], bool(near_air[k]))
    return NodeChecks(median_residual_ns=median, picks=count, score=score, off=off, shift_m=shift,
                      direction_share=share, cause=tuple(causes), level_ns=level, spread_ns=spread, cut=cut)
