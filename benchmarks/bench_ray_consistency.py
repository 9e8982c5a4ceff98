"""Consistency of the bent-ray forward: Jacobian time G_i . s against forward time T_i.

For every pair, ``bent_ray_forward`` returns a first-arrival time T_i (from the
travel-time field) and a row G_i of path lengths along the traced ray. The
linearisation t ~ T(s_k) + G_k (s - s_k) is only sound when G_i . s_k = T_i.
This script reports (G_i . s - T_i) / T_i (median, 95th percentile, max of the
absolute value) for pairs whose ray runs partly in air (air above the ground
or an air-filled void) and for the rest, on

* the demo quarry's truth model (demo_site/truth.yaml) on the model grid and
  on the simulation grid (``refine`` times finer), with the demo's nodes
  (a nodes.csv of the demo's plan, ``--nodes``);
* a flat ground with air above and an air-filled box (surface and borehole nodes).

"traced" is the time along the traced ray (unscaled lengths) against the
field's time, "operator" the returned operator's (rows scaled, see
:func:`reconstruct.forward.first_arrivals.consistent_rows`).

Measured (this machine, 2 cores shared; |G_i . s - T_i| / T_i, median / 95th
percentile / max, pairs over 0.2 %):

=================================  ==========  =========================  =================
case                               pairs       traced ray (before)        operator (after)
=================================  ==========  =========================  =================
demo truth, 1 m, ray partly in air 1743        0.54 / 2.5 / 21 %, 1442    0.000 %, 0
demo truth, 1 m, ground only       533         0.001 / 0.60 / 6.0 %, 46   0.000 %, 0
demo truth, 2 m, ray partly in air 1744        1.1 / 5.7 / 55 %, 1570     0.000 %, 0
demo truth, 2 m, ground only       534         0.002 / 4.1 / 26 %, 104    0.000 %, 0
demo start (rock + air), 2 m, air  1632        1.1 / 5.4 / 55 %, 1464     0.000 %, 0
demo start, 2 m, ground only       646         0.002 / 1.3 / 10 %, 67     0.000 %, 0
flat ground + air box, 1 m, air    167         1.6 / 5.4 / 6.2 %, 164     0.000 %, 0
flat ground + air box, ground only 23          0.000 / 3.5 / 4.2 %, 7     0.000 %, 0
=================================  ==========  =========================  =================

Rays that did not reach their source: 2 of 2,278 on the 1 m demo truth grid,
none elsewhere. Scaling the rows costs 0.14 ms per source (199 rays) against
about 0.3 s per field on the 200-node benchmark grid.

Run: ``python benchmarks/bench_ray_consistency.py [--nodes demo_output/plan/nodes.csv]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from reconstruct.forward.first_arrivals import bent_ray_forward  # noqa: E402
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS  # noqa: E402
from reconstruct.model.grid import Grid, ground_mask  # noqa: E402
from reconstruct.parallel import Executor  # noqa: E402

AIR_SLOWNESS = 1.0 / AIR_VELOCITY_M_PER_NS


def demo_model(nodes_csv, refine):
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes
    from reconstruct.model.placement import place_nodes
    from plan.synthetic.simulate import refined_grid
    from plan.synthetic.truth import load_truth, truth_velocity

    root = Path(__file__).resolve().parents[1] / "demo_site"
    site = load_site(root / "site.yaml")
    truth = load_truth(root / "truth.yaml")
    nodes = read_nodes(nodes_csv)
    grid = refined_grid(site.grid(), refine)
    ground = ground_mask(grid, site.ground.elevation_m)
    xyz = place_nodes(nodes, grid, ground).xyz_m
    velocity = truth_velocity(truth, grid, ground, site.rock.velocity_m_per_ns)
    return grid, 1.0 / velocity, xyz


def flat_model():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (40, 24, 24))
    ground = ground_mask(grid, lambda x, y: np.full_like(x, 18.0))
    slowness = np.where(ground, 1 / 0.1, AIR_SLOWNESS)
    centres = grid.cell_centres_m()
    box = np.all(np.abs(centres - [20.0, 12.0, 9.0]) <= [3.0, 3.0, 2.0], axis=-1)
    slowness[box] = AIR_SLOWNESS
    surface = [(x, y, 18.0 - 1e-6) for x in (3.0, 13.0, 27.0, 37.0) for y in (4.0, 12.0, 20.0)]
    holes = [(x, 12.0, z) for x in (6.0, 34.0) for z in (4.0, 8.0, 12.0, 16.0)]
    return grid, slowness, np.array(surface + holes)


def report(name, grid, slowness, xyz, executor, eikonal_options=None):
    a, b = np.triu_indices(len(xyz), 1)
    t0 = time.perf_counter()
    fwd = bent_ray_forward(grid, slowness, xyz, a, b, executor=executor, eikonal_options=eikonal_options)
    seconds = time.perf_counter() - t0
    s = np.asarray(slowness, dtype=float).ravel()
    g_time = fwd.operator @ s
    rel = (g_time - fwd.time_ns) / fwd.time_ns
    scale = fwd.length_scale if fwd.length_scale is not None else np.ones(a.size)
    traced = 1.0 / scale - 1.0  # the traced ray's own time against the field's, before scaling
    air_len = fwd.operator @ (np.isclose(s, AIR_SLOWNESS)).astype(float)
    air = air_len > 1e-6
    print(f"{name}: {a.size} pairs, {seconds:.1f} s, not reached {np.count_nonzero(~fwd.reached)}")
    for label, sel in (("air in ray", air & fwd.reached), ("ground only", ~air & fwd.reached),
                       ("not reached", ~fwd.reached)):
        if not sel.any():
            print(f"  {label:12s}   n=0")
            continue
        for what, values in (("traced", traced), ("operator", rel)):
            r = np.abs(values[sel]) * 100
            print(f"  {label:12s} {what:8s} n={np.count_nonzero(sel):5d}  |rel| median {np.median(r):.3f} %  "
                  f"p95 {np.percentile(r, 95):.3f} %  max {r.max():.3f} %  "
                  f"signed median {np.median(values[sel]) * 100:+.3f} %  over 0.2 %: {np.count_nonzero(r > 0.2)}")
    return fwd, rel, air


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", default=None, help="nodes.csv of the demo's plan (skip the demo without)")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    executor = Executor(kind="processes", workers=args.workers)
    report("flat ground, air above, air-filled box", *flat_model(), executor)
    if args.nodes:
        for refine in (1, 2):
            grid, slowness, xyz = demo_model(args.nodes, refine)
            report(f"demo truth, refine {refine} ({grid.shape})", grid, slowness, xyz, executor)


if __name__ == "__main__":
    main()
