"""Benchmark of the planner's coverage and layout optimisation.

1. Coverage (ray count and length, direction tensors and angular coverage,
   Fresnel resolution floor, target volume) of 300 nodes (5 boreholes x 20
   nodes and 200 surface nodes), every pair once (44,850 rays), over
   200 x 60 x 70 one-metre cells. Target: pair graph and coverage together
   <= 30 s on 2 cores (the pair graph is timed by the plan-a benchmark; this
   script times the coverage).
2. Greedy optimisation of 200 nodes from 600 candidates (a 120-point start
   layout on a regular surface grid plus 80 borehole nodes, and 400 further
   surface and borehole candidates) on the same grid. Target <= 5 min.

Timings on shared machines vary, so the script also times reference
workloads in the same run and prints each figure as a ratio to them: for the
coverage, the bare straight-ray operator of the same rays (scipy sparse, the
least any coverage needs); for the optimisation, one full coverage of the
200-node start layout.

Run: ``python benchmarks/bench_plan_coverage.py`` (a few minutes);
``--scale 0.5`` shrinks the grid for a quick trial.
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from plan.assess.coverage import CoverageStandard, compute_coverage
from plan.layout.optimise import OptimiseOptions, optimise_layout
from reconstruct.allocator import keep_freed_memory_for_reuse
from reconstruct.io.site import parse_site
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.site import model_grid

GROUND_M = 65.0


def peak_memory_gib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # kB on Linux


def site_of(scale: float):
    shape = [max(4, int(round(n * scale))) for n in (200, 60, 70)]
    return parse_site({
        "name": "benchmark box (invented)",
        "model": {"origin_m": [0, 0, 0], "size_m": [200, 60, 70], "cell_m": [200 / shape[0], 60 / shape[1], 70 / shape[2]]},
        "ground": {"flat_elevation_m": GROUND_M},
        "rock": {"velocity_m_per_ns": 0.115, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "planned_works": [
            {"name": "haul road", "kind": "haul_road", "polyline_m": [[0, 30, GROUND_M], [200, 30, GROUND_M]]},
            {"name": "blast", "kind": "blast_pattern",
             "polygon_m": [[60, 10, GROUND_M], [140, 10, GROUND_M], [140, 50, GROUND_M], [60, 50, GROUND_M]]},
        ],
    }, source="benchmark")


def surface_grid(nx, ny):
    sx, sy = np.meshgrid(np.linspace(4, 196, nx), np.linspace(4, 56, ny), indexing="ij")
    return np.c_[sx.ravel(), sy.ravel(), np.full(sx.size, GROUND_M - 1e-6)]


def boreholes(n_holes, per_hole, y=30.0):
    xs = np.linspace(20, 180, n_holes)
    depths = GROUND_M - np.linspace(3, 60, per_hole)
    return np.array([[x, y, z] for x in xs for z in depths])


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=1.0, help="cells per axis times SCALE (quick trial)")
    parser.add_argument("--max-swaps", type=int, default=400, help="swap limit of the optimiser (default 400)")
    args = parser.parse_args(argv)
    keep_freed_memory_for_reuse()
    site = site_of(args.scale)
    grid, ground = model_grid(site)
    standard = CoverageStandard(min_rays=5, depth_of_interest_m=30.0)
    print(f"grid {grid.shape} = {grid.n_cells:,} cells ({int(ground.sum()):,} ground)")

    # 1. coverage of 300 nodes
    xyz = np.r_[boreholes(5, 20), surface_grid(25, 8)]
    a, b = np.triu_indices(len(xyz), 1)
    t0 = time.perf_counter()
    straight_ray_matrix(grid, xyz[a], xyz[b])
    t_ref = time.perf_counter() - t0
    t0 = time.perf_counter()
    coverage = compute_coverage(site, xyz, standard)
    t_cov = time.perf_counter() - t0
    print(f"coverage, {len(xyz)} nodes, {a.size:,} rays: {t_cov:.2f} s "
          f"(reference: bare straight-ray operator {t_ref:.2f} s; ratio {t_cov / t_ref:.2f}); "
          f"target <= 30 s together with the pair graph; covered {100 * coverage.covered_fraction:.1f} % "
          f"of {int(coverage.target.sum()):,} target cells")

    # 2. optimisation: 200 of 600 candidates
    start = np.r_[surface_grid(15, 8), boreholes(4, 20, y=20.0)]          # 200 nodes: regular start
    rng = np.random.default_rng(5)
    extra_surface = np.c_[rng.uniform(2, 198, 320), rng.uniform(2, 58, 320), np.full(320, GROUND_M - 1e-6)]
    extra_holes = boreholes(4, 20, y=42.0)
    pool = np.r_[start, extra_surface, extra_holes]
    assert pool.shape[0] == 600 and start.shape[0] == 200
    t0 = time.perf_counter()
    compute_coverage(site, start, standard)
    t_ref2 = time.perf_counter() - t0
    t0 = time.perf_counter()
    result = optimise_layout(site, pool, np.arange(200), standard,
                             OptimiseOptions(budget=200, max_swaps=args.max_swaps))
    t_opt = time.perf_counter() - t0
    swaps = sum(1 for h in result.history if h["action"] == "swap")
    print(f"optimisation, 200 of 600 candidates: {t_opt:.1f} s, {swaps} swaps ({result.stop_reason}); "
          f"score {result.start_score:.4f} -> {result.score:.4f} on {result.n_samples:,} sampled target cells "
          f"(step {result.sample_step}); reference: one coverage of 200 nodes {t_ref2:.2f} s; "
          f"ratio {t_opt / t_ref2:.1f}; target <= 300 s")
    print(f"peak memory {peak_memory_gib():.2f} GiB")


if __name__ == "__main__":
    main()
