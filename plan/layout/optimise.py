"""Layout optimisation: greedy add and swap among candidate positions.

The score is the coverage score of :mod:`plan.assess.coverage` (mean over target
cells of ``min(1, rays / min_rays) * min(1, angular / min_angular_coverage)``)
evaluated on a regular sub-lattice of the target cells: every ``step``-th
cell along each axis, with ``step`` the smallest that keeps the sample at or
under ``max_target_samples`` cells (``step = 1`` is the exact score). Ray
counts and direction tensors are exact on the sampled cells, so the sampled
score is an unbiased estimate of the full one. The resolution condition of
the standard (``max_resolution_m``) is left out of the search (a minimum over
rays cannot be updated when a node is removed); it is still reported by
``voidcube plan coverage``.

Search, starting from a given layout (normally the regular grid of the same
number of nodes):

1. *Add*: while the layout has fewer nodes than the budget, add the candidate
   whose pairs with the chosen nodes raise the score most (stop early when no
   candidate raises it).
2. *Swap*: find the chosen nodes whose removal costs least; for each of the
   cheapest few, remove it and add the best candidate in its place; keep the
   swap only when the score rises. Repeat until no swap helps, the swap limit
   or the time limit.

Every accepted step raises the score, so the result never scores lower than
the start. Every candidate's gain is computed at once from the precomputed
ray-cell matrix of all candidate pairs (one sparse product per tensor
component and block of candidates).

References
----------
Nemhauser, G. L., Wolsey, L. A. and Fisher, M. L. (1978), An analysis of
    approximations for maximizing submodular set functions - I, Mathematical
    Programming 14, 265-294 (greedy selection).
Curtis, A. (1999), Optimal experiment design: cross-borehole tomographic
    examples, Geophysical Journal International 136(3), 637-650 (survey design
    for tomography by sequential node choice; from memory).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from reconstruct.errors import InputError
from reconstruct.io.site import Site
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.site import model_grid

from plan.assess.coverage import (
    TENSOR_COMPONENTS,
    CoverageStandard,
    angular_coverage,
    cell_quality,
    target_mask,
)
from plan.synthetic.simulate import all_pairs

__all__ = ["OptimiseOptions", "OptimisationResult", "optimise_layout", "sample_step"]


@dataclass(frozen=True)
class OptimiseOptions:
    """Settings of the layout search.

    Parameters
    ----------
    budget : int
        Largest number of nodes in the layout.
    max_swaps : int
        Upper limit on accepted swaps (default 400).
    removal_tries : int
        Cheapest nodes tried for removal before the search gives up (default 3).
    max_target_samples : int
        Largest number of target cells the score is evaluated on (default 20,000).
    time_limit_s : float or None
        Stop the swap phase after this many seconds (default None: no limit).
    """

    budget: int
    max_swaps: int = 400
    removal_tries: int = 3
    max_target_samples: int = 20000
    time_limit_s: float | None = None

    def __post_init__(self):
        problems = []
        for name in ("budget", "max_swaps", "removal_tries", "max_target_samples"):
            value = getattr(self, name)
            low = 0 if name == "max_swaps" else 1
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
                problems.append(f"{name} must be a whole number >= {low} (got {value!r})")
        if self.time_limit_s is not None and not (isinstance(self.time_limit_s, (int, float))
                                                  and self.time_limit_s > 0):
            problems.append(f"time_limit_s must be > 0 seconds or None (got {self.time_limit_s!r})")
        if problems:
            raise InputError(problems, source="optimiser options")


@dataclass(frozen=True)
class OptimisationResult:
    """Outcome of :func:`optimise_layout`; indices refer to the candidate pool."""

    selected: np.ndarray
    start: np.ndarray
    start_score: float
    score: float
    history: tuple
    sample_step: int
    n_samples: int
    n_candidate_pairs: int
    stop_reason: str
    seconds: float

    @property
    def gain(self) -> float:
        return self.score - self.start_score


def sample_step(target: np.ndarray, max_samples: int) -> int:
    """Smallest sub-lattice step keeping the sampled target cells <= ``max_samples``."""
    step = 1
    while True:
        offset = step // 2
        n = int(target[offset::step, offset::step, offset::step].sum())
        if n <= max_samples or step >= max(target.shape):
            return step
        step += 1


class _Search:
    """Ray-cell matrices of all candidate pairs on the sampled cells, and the running sums."""

    def __init__(self, R_length, unit, pair_id, standard, n_samples):
        self.R_length = R_length.tocsr()
        self.R_count = sp.csr_matrix((np.ones_like(self.R_length.data), self.R_length.indices,
                                      self.R_length.indptr), shape=self.R_length.shape)
        self.weights = np.stack([unit[:, a] * unit[:, b] for a, b in TENSOR_COMPONENTS], axis=1)
        self.pair_id = pair_id
        self.standard = standard
        self.n = n_samples
        self.count = np.zeros(n_samples)
        self.tensor = np.zeros((n_samples, 6))
        self.block = max(1, 3_000_000 // max(n_samples, 1))

    def quality_sum(self, count, tensor) -> np.ndarray:
        q = cell_quality(count, angular_coverage(tensor), self.standard)
        return q.sum(axis=-1)

    @property
    def score(self) -> float:
        return float(self.quality_sum(self.count, self.tensor)) / self.n

    def _pairs(self, node, others):
        ids = self.pair_id[node, others]
        return ids[ids >= 0]

    def apply(self, node, others, sign):
        rows = self._pairs(node, others)
        if rows.size == 0:
            return
        self.count += sign * np.asarray(self.R_count[rows].sum(axis=0)).ravel()
        self.tensor += sign * np.asarray(self.R_length[rows].T @ self.weights[rows])

    def deltas(self, nodes, partners, sign) -> np.ndarray:
        """Score change of adding (sign +1) or removing (-1) each of ``nodes``
        together with its pairs to ``partners`` (a node is never its own partner)."""
        nodes = np.asarray(nodes, dtype=np.int64)
        partners = np.asarray(partners, dtype=np.int64)
        base = self.quality_sum(self.count, self.tensor)
        out = np.empty(nodes.size)
        for start in range(0, nodes.size, self.block):
            chunk = nodes[start:start + self.block]
            ids = self.pair_id[np.ix_(chunk, partners)]
            rows, cols = np.nonzero(ids >= 0)
            B = sp.csr_matrix((np.full(rows.size, float(sign)), (rows, ids[rows, cols])),
                              shape=(chunk.size, self.R_length.shape[0]))
            count = self.count[None, :] + (B @ self.R_count).toarray()
            tensor = np.empty((chunk.size, self.n, 6))
            for k in range(6):
                Bk = B.multiply(self.weights[:, k][None, :]).tocsr()
                tensor[:, :, k] = self.tensor[None, :, k] + (Bk @ self.R_length).toarray()
            out[start:start + chunk.size] = (self.quality_sum(count, tensor) - base) / self.n
        return out


def _candidate_matrix(grid, xyz, a, b, columns, progress):
    blocks = []
    chunk = 4096
    for start in range(0, a.size, chunk):
        stop = min(start + chunk, a.size)
        G = straight_ray_matrix(grid, xyz[a[start:stop]], xyz[b[start:stop]])
        blocks.append(G[:, columns])
        if progress:
            progress(f"candidate rays: {stop:,}/{a.size:,}")
    if not blocks:
        return sp.csr_matrix((0, columns.size))
    return sp.vstack(blocks, format="csr")


def optimise_layout(
    site: Site,
    pool_xyz_m,
    start,
    standard: CoverageStandard,
    options: OptimiseOptions,
    *,
    progress=None,
) -> OptimisationResult:
    """Raise the coverage score of a layout by greedy adds and swaps among candidates.

    Parameters
    ----------
    site : Site
    pool_xyz_m : ndarray, shape (n, 3)
        All positions the search may use (candidates and the start layout),
        as the forward model places them, metres.
    start : sequence of int
        Indices into ``pool_xyz_m`` of the starting layout (may be empty).
    standard : CoverageStandard
    options : OptimiseOptions
    progress : callable, optional
        ``progress(message)``.

    Returns
    -------
    OptimisationResult
        Its ``score`` is never below ``start_score``.

    Raises
    ------
    InputError
        When the start layout has more nodes than the budget, or the pool
        fewer positions than the budget.
    """
    began = time.perf_counter()
    xyz = np.asarray(pool_xyz_m, dtype=float)
    if xyz.ndim != 2 or xyz.shape[1] != 3:
        raise ValueError(f"pool_xyz_m has shape {xyz.shape}, expected (n, 3)")
    n_pool = xyz.shape[0]
    start = np.unique(np.asarray(start, dtype=np.int64))
    if start.size and (start.min() < 0 or start.max() >= n_pool):
        raise ValueError("start holds indices outside the pool")
    if start.size > options.budget:
        raise InputError(f"the start layout has {start.size} nodes, more than the budget of "
                         f"{options.budget}; give --budget {start.size} or more, or a smaller layout")
    if options.budget > n_pool:
        raise InputError(f"the budget of {options.budget} nodes is larger than the {n_pool} positions "
                         "available (candidates and start layout); give more candidates or a smaller budget")

    grid, ground = model_grid(site)
    target, _ = target_mask(site, grid, ground, standard)
    step = sample_step(target, options.max_target_samples)
    off = step // 2
    sampled = np.zeros_like(target)
    sampled[off::step, off::step, off::step] = target[off::step, off::step, off::step]
    columns = np.flatnonzero(sampled.ravel())
    if columns.size == 0:
        raise InputError("the target volume holds no ground cell; check the planned works and "
                         "depth_of_interest_m, or the model box")
    a, b = all_pairs(n_pool, both_directions=False, xyz_m=xyz, max_distance_m=standard.max_distance_m)
    keep = np.linalg.norm(xyz[b] - xyz[a], axis=1) > 1e-6
    a, b = a[keep], b[keep]
    pair_id = np.full((n_pool, n_pool), -1, dtype=np.int64)
    pair_id[a, b] = np.arange(a.size)
    pair_id[b, a] = np.arange(a.size)
    if progress:
        progress(f"score on {columns.size:,} target cells (every {step}. cell along each axis); "
                 f"{a.size:,} candidate pairs")
    R = _candidate_matrix(grid, xyz, a, b, columns, progress)
    d = xyz[b] - xyz[a]
    unit = d / np.maximum(np.linalg.norm(d, axis=1), 1e-12)[:, None]
    search = _Search(R, unit, pair_id, standard, columns.size)

    chosen: list[int] = []
    for k in start:
        search.apply(int(k), np.asarray(chosen, dtype=np.int64), +1)
        chosen.append(int(k))
    start_score = search.score
    history = [{"step": 0, "action": "start", "added": None, "removed": None, "score": start_score}]
    in_layout = np.zeros(n_pool, dtype=bool)
    in_layout[chosen] = True

    def best_addition(exclude=()):
        free = np.flatnonzero(~in_layout)
        free = free[~np.isin(free, exclude)]
        if free.size == 0:
            return None, -np.inf
        gains = search.deltas(free, np.flatnonzero(in_layout), +1)
        k = int(np.argmax(gains))
        return int(free[k]), float(gains[k])

    stop_reason = "no swap raises the score"
    while in_layout.sum() < options.budget:
        node, gain = best_addition()
        if node is None or gain <= 1e-12:
            stop_reason = "no candidate raises the score"
            break
        search.apply(node, np.flatnonzero(in_layout), +1)
        in_layout[node] = True
        history.append({"step": len(history), "action": "add", "added": node, "removed": None,
                        "score": search.score})
        if progress:
            progress(f"add: {int(in_layout.sum())}/{options.budget} nodes, score {search.score:.4f}")

    swaps = 0
    while swaps < options.max_swaps:
        if options.time_limit_s is not None and time.perf_counter() - began > options.time_limit_s:
            stop_reason = f"time limit of {options.time_limit_s:g} s reached"
            break
        chosen_now = np.flatnonzero(in_layout)
        if chosen_now.size == 0:
            break
        current = search.score
        losses = search.deltas(chosen_now, chosen_now, -1)
        improved = False
        for k in chosen_now[np.argsort(-losses)][: options.removal_tries]:
            k = int(k)
            in_layout[k] = False
            search.apply(k, np.flatnonzero(in_layout), -1)
            node, gain = best_addition(exclude=(k,))
            if node is not None and search.score + gain > current + 1e-12:
                search.apply(node, np.flatnonzero(in_layout), +1)
                in_layout[node] = True
                swaps += 1
                history.append({"step": len(history), "action": "swap", "added": node, "removed": k,
                                "score": search.score})
                if progress:
                    progress(f"swap {swaps}: score {search.score:.4f}")
                improved = True
                break
            search.apply(k, np.flatnonzero(in_layout), +1)
            in_layout[k] = True
        if not improved:
            stop_reason = "no swap raises the score"
            break
    else:
        stop_reason = f"swap limit of {options.max_swaps} reached"

    selected = np.flatnonzero(in_layout)
    # recompute both scores from scratch: the running sums could drift by rounding
    final = _score_of(search, selected)
    begin = _score_of(search, start)
    if final < begin:
        selected, final = start, begin
        stop_reason += "; no improvement kept"
    return OptimisationResult(
        selected=selected, start=start, start_score=begin, score=final, history=tuple(history),
        sample_step=step, n_samples=int(columns.size), n_candidate_pairs=int(a.size),
        stop_reason=stop_reason, seconds=time.perf_counter() - began,
    )


def _score_of(search: _Search, nodes) -> float:
    nodes = np.asarray(nodes, dtype=np.int64)
    if nodes.size < 2:
        return float(search.quality_sum(np.zeros(search.n), np.zeros((search.n, 6)))) / search.n
    i, j = np.triu_indices(nodes.size, 1)
    rows = search.pair_id[nodes[i], nodes[j]]
    rows = rows[rows >= 0]
    count = np.asarray(search.R_count[rows].sum(axis=0)).ravel()
    tensor = np.asarray(search.R_length[rows].T @ search.weights[rows])
    return float(search.quality_sum(count, tensor)) / search.n
