"""Benchmark of the foundation: straight-ray operator and full inversion.

200 nodes (5 boreholes x 20 nodes plus 100 surface nodes), every pair once
(19,900 picks), through 200 x 60 x 70 one-metre cells (840,000 cells).
Targets on 2 cores: operator <= 5 s, inversion <= 30 s, peak memory <= 3 GiB.

Timings on shared machines vary by up to about 3x between runs, so the script
also times a reference workload in the same run (100 plain LSQR iterations on
the bare operator, scipy only) and prints each figure as a ratio to it.

Run: ``python benchmarks/bench_foundation.py`` (about one to two minutes).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np
from scipy.sparse.linalg import lsqr

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from reconstruct.allocator import keep_freed_memory_for_reuse
from reconstruct.model.grid import Grid, ground_mask
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.inverse.solver import InversionOptions, invert_travel_times
from reconstruct.inverse.multilevel import choose_coarsening_factor, coarse_level
from reconstruct.inverse.regularization import first_difference_operator
from reconstruct.forward.straight_rays import straight_ray_matrix


def peak_memory_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # kB on Linux


def survey(ground_m: float):
    holes_x = np.linspace(20, 180, 5)
    depths = ground_m - np.linspace(3, 60, 20)
    bore = np.array([[x, 30.0, z] for x in holes_x for z in depths])
    sx, sy = np.meshgrid(np.linspace(6, 194, 25), np.linspace(8, 52, 4), indexing="ij")
    surf = np.c_[sx.ravel(), sy.ravel(), np.full(sx.size, ground_m - 1e-6)]
    xyz = np.r_[bore, surf]
    tx, rx = np.triu_indices(len(xyz), 1)
    return xyz, tx, rx


def build_problem(scale: float = 1.0):
    """The benchmark survey: grid, ground, nodes, picks and the straight-ray operator.

    Returns a dict with ``grid``, ``ground``, ``xyz``, ``tx``, ``rx``, ``G``,
    ``time_ns``, ``sigma_ns`` and ``t_operator`` (seconds to build ``G``).
    Synthetic truth: limestone with a fast and a slow block, clock offsets,
    0.5 ns noise (seed 1).
    """
    ground_m = 65.0
    shape = tuple(max(4, int(round(n * scale))) for n in (200, 60, 70))
    grid = Grid((0.0, 0.0, 0.0), (200 / shape[0], 60 / shape[1], 70 / shape[2]), shape)
    ground = ground_mask(grid, lambda x, y: np.full_like(x, ground_m))
    xyz, tx, rx = survey(ground_m)
    t0 = time.perf_counter()
    G = straight_ray_matrix(grid, xyz[tx], xyz[rx])
    t_operator = time.perf_counter() - t0
    rng = np.random.default_rng(1)
    centres = grid.cell_centres_m()
    velocity = np.where(ground, 0.115, AIR_VELOCITY_M_PER_NS)
    fast = (np.abs(centres[..., 0] - 80) < 5) & (np.abs(centres[..., 1] - 30) < 5) & (np.abs(centres[..., 2] - 40) < 3)
    slow = (np.abs(centres[..., 0] - 130) < 4) & (np.abs(centres[..., 1] - 30) < 4) & (np.abs(centres[..., 2] - 30) < 4)
    velocity[fast & ground] = 0.2
    velocity[slow & ground] = 0.08
    offsets = rng.normal(0, 1.5, len(xyz))
    time_ns = G @ (1 / velocity).ravel() + offsets[rx] - offsets[tx] + rng.normal(0, 0.5, tx.size)
    return dict(grid=grid, ground=ground, xyz=xyz, tx=tx, rx=rx, G=G, time_ns=time_ns,
                sigma_ns=np.full(tx.size, 0.5), t_operator=t_operator)


def reference_seconds(G, time_ns) -> float:
    """The reference workload: 100 plain LSQR iterations on the bare operator."""
    t0 = time.perf_counter()
    lsqr(G, time_ns, iter_lim=100, atol=0, btol=0, conlim=0)
    return time.perf_counter() - t0


def run_inversion(problem, options=InversionOptions(), progress=None):
    """The full inversion of the benchmark problem (lambda search included)."""
    grid, ground = problem["grid"], problem["ground"]
    ground_flat = ground.ravel()
    reference = np.where(ground_flat, 1 / 0.115, 1 / AIR_VELOCITY_M_PER_NS)
    D = first_difference_operator(grid, ground)
    factor = choose_coarsening_factor(int(ground.sum()))
    coarse = coarse_level(grid, ground, factor) if factor > 1 else None
    return invert_travel_times(problem["G"], problem["time_ns"], problem["tx"], problem["rx"], len(problem["xyz"]),
                               ground_flat, reference, D, cell_m=grid.cell_m, sigma_ns=problem["sigma_ns"],
                               options=options, coarse=coarse, progress=progress)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0,
                        help="shrink the grid for a quick trial (cells per axis times SCALE)")
    args = parser.parse_args(argv)
    keep_freed_memory_for_reuse()
    problem = build_problem(args.scale)
    grid, ground, G, tx = problem["grid"], problem["ground"], problem["G"], problem["tx"]
    print(f"grid {grid.shape} = {grid.n_cells:,} cells ({int(ground.sum()):,} ground), "
          f"{len(problem['xyz'])} nodes, {tx.size:,} picks")
    t_operator = problem["t_operator"]
    print(f"operator: {t_operator:.2f} s, {G.nnz:,} non-zeros ({G.nnz / tx.size:.0f} per ray), "
          f"{(G.data.nbytes + G.indices.nbytes + G.indptr.nbytes) / 2**20:.0f} MiB")

    t_reference = reference_seconds(G, problem["time_ns"])
    print(f"reference: 100 plain LSQR iterations on the bare operator: {t_reference:.2f} s")

    t0 = time.perf_counter()
    result = run_inversion(problem, progress=lambda m: print("   ", m, flush=True))
    t_inversion = time.perf_counter() - t0
    fine_iterations = sum(s["iterations"] for s in result.lambda_search if s["level"] == "fine")
    coarse_iterations = sum(s["iterations"] for s in result.lambda_search if s["level"] != "fine")
    print(f"inversion: {t_inversion:.2f} s (lambda {result.lambda_smooth:.4g} by {result.lambda_method}; "
          f"{len(result.lambda_search)} solves, {coarse_iterations} coarse and {fine_iterations} fine "
          f"iterations); RMS {result.rms_ns:.3f} ns, chi^2/N {result.chi2 / tx.size:.3f}")
    peak = peak_memory_gib()
    print()
    print(f"{'figure':<28}{'measured':>12}{'target':>10}{'ratio to reference':>22}")
    print(f"{'operator build (s)':<28}{t_operator:>12.2f}{5:>10}{t_operator / t_reference:>22.2f}")
    print(f"{'inversion (s)':<28}{t_inversion:>12.2f}{30:>10}{t_inversion / t_reference:>22.2f}")
    print(f"{'peak memory (GiB)':<28}{peak:>12.2f}{3:>10}{'':>22}")
    print(f"{'non-zeros':<28}{G.nnz:>12,}")


if __name__ == "__main__":
    main()
