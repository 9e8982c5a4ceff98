"""Benchmark of the pick checks and of the robust inversion's overhead.

1. Pick checks of 39,800 picks: the 200 nodes of the foundation benchmark (5 boreholes
   of 20 nodes, 100 surface nodes), every ordered pair, times through rock (the
   direct air wave where it comes first between surface nodes), node clock
   offsets, 0.5 ns noise and 2 % gross outliers. Target <= 5 s.
2. The robust (Huber) inversion against the plain inversion on the foundation
   benchmark problem (``bench_foundation.build_problem``): same data, same
   lambda rule. Target overhead <= 3x.

Timings on shared machines vary, so the reference workload of the foundation
benchmark (100 plain LSQR iterations on the bare operator) is timed in the same
run and every figure is also printed as a ratio to it.

Run: ``python benchmarks/bench_qc.py`` (a few minutes; ``--scale 0.3`` for a quick trial).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from benchmarks.bench_foundation import build_problem, reference_seconds, run_inversion, survey  # noqa: E402
from plan.synthetic.simulate import gross_errors  # noqa: E402
from reconstruct.allocator import keep_freed_memory_for_reuse  # noqa: E402
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.inverse.solver import InversionOptions  # noqa: E402
from reconstruct.checks.picks import FLAG_RECIPROCAL, PickCheckOptions, check_picks  # noqa: E402
from reconstruct.io.tables import Nodes, Picks  # noqa: E402


def qc_problem(ground_m: float = 65.0, rock_m_per_ns: float = 0.115):
    xyz, _, _ = survey(ground_m)
    n = len(xyz)
    kinds = tuple("borehole" if k < 100 else "surface" for k in range(n))
    nodes = Nodes(ids=tuple(f"N{k:03d}" for k in range(n)), xyz_m=xyz, kinds=kinds, boreholes=(None,) * n,
                  lines=np.arange(2, n + 2), source="nodes.csv")
    tx, rx = np.nonzero(~np.eye(n, dtype=bool))
    d = np.linalg.norm(xyz[rx] - xyz[tx], axis=1)
    surface = np.array([k == "surface" for k in kinds])
    travel = np.where(surface[tx] & surface[rx], d / AIR_VELOCITY_M_PER_NS, d / rock_m_per_ns)
    rng = np.random.default_rng(3)
    clock = rng.normal(0, 1.5, n)
    t = travel + clock[rx] - clock[tx] + rng.normal(0, 0.5, tx.size)
    error = gross_errors(t, 0.02, 20.0, seed=3)
    picks = Picks(tx=tx, rx=rx, time_ns=t + error, sigma_ns=np.full(tx.size, 0.5), amplitude=None, quality=None,
                  lines=np.arange(2, tx.size + 2), excluded=(), source="picks.csv", n_rows=tx.size)
    return nodes, picks, clock - clock.mean(), error != 0


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0,
                        help="shrink the inversion grid for a quick trial (cells per axis times SCALE)")
    args = parser.parse_args(argv)
    keep_freed_memory_for_reuse()

    problem = build_problem(args.scale)
    t_reference = reference_seconds(problem["G"], problem["time_ns"])
    print(f"reference: 100 plain LSQR iterations on the bare operator: {t_reference:.2f} s")

    nodes, picks, clock, outlier = qc_problem()
    t0 = time.perf_counter()
    checks = check_picks(nodes, picks, nodes.xyz_m, lambda x, y: np.full_like(x, 65.0), 0.115,
                         options=PickCheckOptions())
    t_qc = time.perf_counter() - t0
    counts = checks.counts()
    flagged = checks.has(FLAG_RECIPROCAL)
    print(f"pick checks: {len(picks):,} picks in {t_qc:.2f} s; flags {counts}; largest time-zero error "
          f"{np.max(np.abs(checks.time_zero_ns - clock)):.3f} ns; outliers flagged {flagged[outlier].mean():.1%}")

    grid, G = problem["grid"], problem["G"]
    print(f"inversion problem: grid {grid.shape}, {G.shape[0]:,} picks, {G.nnz:,} non-zeros")
    t0 = time.perf_counter()
    plain = run_inversion(problem)
    t_plain = time.perf_counter() - t0
    print(f"plain inversion: {t_plain:.2f} s, lambda {plain.lambda_smooth:.4g}, RMS {plain.rms_ns:.3f} ns")
    t0 = time.perf_counter()
    robust = run_inversion(problem, InversionOptions(robust="huber"))
    t_robust = time.perf_counter() - t0
    print(f"robust (Huber) inversion: {t_robust:.2f} s, lambda {robust.lambda_smooth:.4g}, RMS {robust.rms_ns:.3f} ns, "
          f"{robust.robust_reweightings} reweightings, {int(robust.rejected.sum())} picks rejected")
    print()
    print(f"{'figure':<34}{'measured':>10}{'target':>10}{'ratio to reference':>22}")
    print(f"{'pick checks of ' + format(len(picks), ',') + ' picks (s)':<34}{t_qc:>10.2f}{5:>10}{t_qc / t_reference:>22.2f}")
    print(f"{'plain inversion (s)':<34}{t_plain:>10.2f}{'':>10}{t_plain / t_reference:>22.2f}")
    print(f"{'robust inversion (s)':<34}{t_robust:>10.2f}{'':>10}{t_robust / t_reference:>22.2f}")
    print(f"{'robust / plain':<34}{t_robust / t_plain:>10.2f}{3:>10}")


if __name__ == "__main__":
    main()
