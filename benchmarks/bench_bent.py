"""Benchmark of one bent-ray forward iteration: fields, tracing, three engines.

The survey of the foundation benchmark: 200 nodes (5 boreholes of 20 nodes and
100 surface nodes) on 200 x 60 x 70 one-metre cells with flat ground at
z = 65 m, air above and an air-filled void. One iteration computes a
travel-time field per source node (about 199 fields cover the 19,900 pairs)
and traces every pair's ray back through it.

Target: one iteration <= 60 s for 200 nodes on 2 cores. The script
times one field alone, then the whole forward with the serial engine, the local
process pool and a Dask LocalCluster of 2 workers, checks that the three
give the same times, and times the regularised solve with the traced rays
(the rest of an iteration: lambda search included) and their sum. The reference measured in the same run is one naive
scikit-fmm field (order 2, one-cell source) when scikit-fmm is installed.

Run: ``python benchmarks/bench_bent.py`` (serial alone takes several minutes;
``--nodes 60`` times a subset, ``--engines processes,dask`` skips serial).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from benchmarks.bench_foundation import run_inversion, survey  # noqa: E402
from reconstruct.allocator import keep_freed_memory_for_reuse  # noqa: E402
from reconstruct.forward.first_arrivals import bent_ray_forward, choose_sources  # noqa: E402
from reconstruct.forward.eikonal import travel_time_field  # noqa: E402
from reconstruct.model.grid import Grid, ground_mask  # noqa: E402
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS  # noqa: E402
from reconstruct.parallel import Executor  # noqa: E402


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", type=int, default=200, help="use the first N nodes (default 200)")
    parser.add_argument("--engines", default="serial,processes,dask",
                        help="comma-separated engines to time (serial, processes, dask)")
    args = parser.parse_args(argv)
    keep_freed_memory_for_reuse()
    ground_m = 65.0
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (200, 60, 70))
    ground = ground_mask(grid, lambda x, y: np.full_like(x, ground_m))
    centres = grid.cell_centres_m()
    slowness = np.where(ground, 1 / 0.115, 1 / AIR_VELOCITY_M_PER_NS)
    void = np.sum((centres - [80, 30, 40]) ** 2, axis=-1) < 4.0**2
    slowness[void] = 1 / AIR_VELOCITY_M_PER_NS
    xyz, _, _ = survey(ground_m)
    rng = np.random.default_rng(0)
    keep = np.sort(rng.choice(len(xyz), size=min(args.nodes, len(xyz)), replace=False))
    xyz = xyz[keep]
    a, b = np.triu_indices(len(xyz), 1)
    n_fields = len(choose_sources(a, b, len(xyz), xyz))
    print(f"grid {grid.shape} = {grid.n_cells:,} cells, {len(xyz)} nodes, {a.size:,} pairs, {n_fields} fields")

    travel_time_field(grid, slowness, xyz[0])  # compile
    t0 = time.perf_counter()
    for k in range(3):
        travel_time_field(grid, slowness, xyz[k])
    per_field = (time.perf_counter() - t0) / 3
    print(f"one field: {per_field:.2f} s")
    reference = None
    try:
        import skfmm

        phi = np.ones(grid.shape)
        phi[tuple(grid.cell_index(xyz[0])[0])] = -1
        skfmm.travel_time(phi, 1 / slowness, dx=1.0, order=2)
        t0 = time.perf_counter()
        for _ in range(3):
            skfmm.travel_time(phi, 1 / slowness, dx=1.0, order=2)
        reference = (time.perf_counter() - t0) / 3
        print(f"reference, naive scikit-fmm field: {reference:.2f} s (ratio {per_field / reference:.2f})")
    except ImportError:
        print("scikit-fmm not installed: no reference field time")

    results = {}
    elapsed_by_engine = {}
    for engine in args.engines.split(","):
        executor = Executor(kind="serial") if engine == "serial" else Executor(kind=engine, workers=2)
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            fwd = bent_ray_forward(grid, slowness, xyz, a, b, executor=executor)
        elapsed = time.perf_counter() - t0
        results[engine] = fwd
        elapsed_by_engine[engine] = elapsed
        print(f"one forward iteration, {engine}: {elapsed:.1f} s "
              f"({elapsed / n_fields:.2f} s per field; rays not reaching their source: {(~fwd.reached).sum()})")
    first = next(iter(results.values()))
    for engine, fwd in results.items():
        diff = np.max(np.abs(fwd.time_ns - first.time_ns))
        print(f"{engine}: largest time difference to the first engine {diff:.2e} ns")

    # the rest of a bent-ray iteration: the regularised solve with the traced
    # rays (lambda search included), one pick per pair with 0.5 ns noise
    noise = np.random.default_rng(1).normal(0.0, 0.5, a.size)
    problem = dict(grid=grid, ground=ground, G=first.operator, time_ns=first.time_ns + noise, tx=a, rx=b,
                   xyz=xyz, sigma_ns=np.full(a.size, 0.5))
    t0 = time.perf_counter()
    step = run_inversion(problem)
    solve = time.perf_counter() - t0
    print(f"regularised solve with the bent rays (lambda search included): {solve:.1f} s "
          f"(lambda {step.lambda_smooth:.3g}, chi^2/N {step.chi2 / a.size:.3f})")
    for engine in results:
        print(f"one full bent-ray iteration (fields, rays and solve), {engine}: "
              f"{elapsed_by_engine[engine] + solve:.1f} s (target 60 s on 2 cores)")
    print(f"peak memory of this process: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20:.2f} GiB "
          "(each worker holds the model once and one field at a time)")


if __name__ == "__main__":
    main()
