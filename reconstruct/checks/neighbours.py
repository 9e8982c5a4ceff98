"""Each pick against its neighbours: which pick of a mismatched reciprocal pair to blame.

A reciprocal pair whose two picks disagree holds one gross error more often
than two. The pick at fault is the one that also disagrees with its
neighbours: the picks of the same transmitter at the nearest other receivers,
and of the same receiver from the nearest other transmitters. Their rays run
close to its own, so their residuals against the reference model (after the
per-node time-zero correction) tell what its residual should be, whatever the
rock does along the way; the reverse pick is not among them (it has the other
transmitter and receiver).

Rules
-----
For pick ``k`` with neighbour residuals ``r_j``:

- local level ``m_k = median(r_j)`` and local spread
  ``s_k = 1.4826 median(|r_j - m_k|)`` (the normalised median absolute
  deviation, MAD [1]_);
- its score ``z_k = |r_k - m_k| / max(s_k, sigma_k)`` (``sigma_k`` its pick
  uncertainty, so that a very smooth neighbourhood does not make noise look
  gross). With fewer than ``MIN_NEIGHBOURS`` neighbours the level and spread
  of all the picks are used instead.

For a mismatched pair, the pick with the larger score is blamed; the other is
blamed too only when its own score exceeds the cut of 3.5 (the outlier rule
of Iglewicz and Hoaglin [2]_ on the MAD-standardised score, "modified
z-score > 3.5", here from memory; Hampel's identifier [3]_ is the same rule
with another cut), or when the two scores are too close to tell
(the larger below twice the smaller and below the cut: both are flagged, as
when no neighbour can decide).

References
----------
.. [1] Rousseeuw, P. J. and Croux, C. (1993), Alternatives to the median
   absolute deviation, Journal of the American Statistical Association
   88(424), 1273-1283, doi:10.1080/01621459.1993.10476408 (the MAD and its
   factor 1.4826 for Gaussian data).
.. [2] Iglewicz, B. and Hoaglin, D. C. (1993), How to Detect and Handle
   Outliers, ASQC Basic References in Quality Control 16, ASQC Quality Press
   (modified z-score ``0.6745 (x - median) / MAD``, outliers beyond 3.5; from
   memory).
.. [3] Hampel, F. R. (1974), The influence curve and its role in robust
   estimation, Journal of the American Statistical Association 69(346),
   383-393, doi:10.1080/01621459.1974.10482962 (the MAD as a robust scale and
   rejection beyond a few MADs; from memory).
"""

from __future__ import annotations

import numpy as np

from reconstruct.inverse.robust import MAD_TO_SIGMA

__all__ = ["MIN_NEIGHBOURS", "neighbour_levels", "neighbour_scores", "blame_pairs"]

#: Fewer neighbours than this: the pick is compared with all the picks instead.
MIN_NEIGHBOURS = 3


def _nearest_in_groups(group, other_xyz, count: int) -> np.ndarray:
    """For every pick, the indices of up to ``count`` picks of the same ``group``
    (transmitter or receiver) whose other node is nearest to its own other node;
    shape ``(m, count)``, -1 where there are fewer."""
    m = group.size
    order = np.argsort(group, kind="stable")
    bounds = np.flatnonzero(np.r_[True, np.diff(group[order]) != 0, True])
    out = np.full((m, count), -1, dtype=np.int64)
    for start, end in zip(bounds[:-1], bounds[1:]):
        members = order[start:end]
        if members.size < 2:
            continue
        xyz = other_xyz[members]
        d2 = ((xyz[:, None, :] - xyz[None, :, :]) ** 2).sum(axis=2)
        np.fill_diagonal(d2, np.inf)
        take = min(count, members.size - 1)
        nearest = np.argsort(d2, axis=1, kind="stable")[:, :take]
        out[members, :take] = members[nearest]
    return out


def neighbour_levels(tx, rx, xyz_m, residual_ns, *, count: int = 6):
    """Median and normalised MAD of every pick's neighbours' residuals.

    Parameters
    ----------
    tx, rx : ndarray of int, shape (m,)
        Transmitting and receiving node of each pick.
    xyz_m : ndarray, shape (n_nodes, 3)
        Node positions, metres.
    residual_ns : ndarray, shape (m,)
        Residual of each pick against the reference model after the time-zero correction, ns.
    count : int
        Neighbours taken on each side (same transmitter, same receiver).

    Returns
    -------
    level_ns, spread_ns : ndarray, shape (m,)
        Median and ``1.4826 * MAD`` of the neighbours' residuals; NaN with
        fewer than :data:`MIN_NEIGHBOURS` neighbours with a finite residual.
    """
    tx = np.asarray(tx, dtype=np.int64)
    rx = np.asarray(rx, dtype=np.int64)
    xyz = np.asarray(xyz_m, dtype=float)
    r = np.asarray(residual_ns, dtype=float)
    index = np.hstack([_nearest_in_groups(tx, xyz[rx], count), _nearest_in_groups(rx, xyz[tx], count)])
    values = np.where(index >= 0, r[np.maximum(index, 0)] if r.size else 0.0, np.nan)
    enough = np.isfinite(values).sum(axis=1) >= MIN_NEIGHBOURS
    level = np.full(r.size, np.nan)
    spread = np.full(r.size, np.nan)
    if enough.any():
        v = values[enough]
        level[enough] = np.nanmedian(v, axis=1)
        spread[enough] = MAD_TO_SIGMA * np.nanmedian(np.abs(v - level[enough, None]), axis=1)
    return level, spread


def neighbour_scores(residual_ns, sigma_ns, level_ns, spread_ns) -> np.ndarray:
    """``|r - m| / max(s, sigma)`` of every pick (see the module notes).

    Where a pick has too few neighbours (``level_ns`` NaN), the median and
    normalised MAD of all the finite residuals stand in for its neighbours'.
    """
    r = np.asarray(residual_ns, dtype=float)
    sigma = np.asarray(sigma_ns, dtype=float)
    finite = r[np.isfinite(r)]
    whole_level = float(np.median(finite)) if finite.size else 0.0
    whole_spread = float(MAD_TO_SIGMA * np.median(np.abs(finite - whole_level))) if finite.size else 0.0
    level = np.where(np.isfinite(level_ns), level_ns, whole_level)
    spread = np.where(np.isfinite(spread_ns), spread_ns, whole_spread)
    return np.abs(r - level) / np.maximum(spread, np.maximum(sigma, 1e-9))


def blame_pairs(first, second, score, *, cut: float = 3.5):
    """Which pick of each mismatched pair to flag.

    Parameters
    ----------
    first, second : ndarray of int, shape (p,)
        The two picks of each mismatched reciprocal pair.
    score : ndarray, shape (m,)
        :func:`neighbour_scores` of every pick.
    cut : float
        Score beyond which a pick disagrees with its neighbours on its own.

    Returns
    -------
    flag_first, flag_second : ndarray of bool, shape (p,)
        At least one of the two is True in every pair.
    """
    a = np.nan_to_num(np.asarray(score, dtype=float)[first], nan=np.inf)
    b = np.nan_to_num(np.asarray(score, dtype=float)[second], nan=np.inf)
    high, low = np.maximum(a, b), np.minimum(a, b)
    undecided = (high < cut) & (high < 2.0 * low)
    flag_first = (a >= b) | (a > cut) | undecided
    flag_second = (b > a) | (b > cut) | undecided
    return flag_first, flag_second
