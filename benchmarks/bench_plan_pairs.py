"""Benchmark of the planner's pair graph: 300 nodes over 200 x 60 x 70 cells.

An invented benched pit (1 m cells, two benches and a sump, five boreholes)
gets a 300-node layout from ``plan.layout.layouts.design_layout``; then the link
budget of all 44,850 pairs (with the air-path check along every straight
line) and the networkx pair graph are built and summarised. The target for
the pair graph together with the coverage (benchmarked separately) is 30 s on
2 cores.

Timings on shared machines vary, so the run also times a reference workload in
the same process: the straight-ray (Siddon) matrix of the same 44,850 pairs
over the same grid, which any coverage computation needs. Read the ratio.

Run: ``python benchmarks/bench_plan_pairs.py`` (``--nodes N`` for another size).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from plan.layout.layouts import LayoutOptions, design_layout  # noqa: E402
from plan.radio.link_budget import link_budget_for_site  # noqa: E402
from plan.radio.pair_graph import build_pair_graph, pair_graph_summary  # noqa: E402
from reconstruct.io.site import parse_site  # noqa: E402
from reconstruct.forward.straight_rays import straight_ray_matrix  # noqa: E402
from reconstruct.io.tables import Nodes  # noqa: E402

SITE = {
    "name": "benchmark pit (invented)",
    "model": {"origin_m": [0, 0, 0], "size_m": [200, 60, 70], "cell_m": 1.0},
    "ground": {"benches": [
        {"name": "lower", "floor_m": 55, "polygon_m": [[0, 0], [200, 0], [200, 30], [0, 30]]},
        {"name": "upper", "floor_m": 65, "polygon_m": [[0, 30], [200, 30], [200, 60], [0, 60]]},
        {"name": "sump", "floor_m": 50, "polygon_m": [[90, 5], [120, 5], [120, 20], [90, 20]]}]},
    "rock": {"velocity_m_per_ns": 0.115, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
    "boreholes": [{"id": f"BH{k + 1}", "collar_m": [x, y, z], "azimuth_deg": 0, "dip_deg": 90, "length_m": 45}
                  for k, (x, y, z) in enumerate([(30, 15, 55), (80, 15, 55), (140, 15, 55), (60, 45, 65),
                                                 (170, 45, 65)])],
    "exclusion_zones": [{"name": "workshop", "polygon_m": [[0, 50], [20, 50], [20, 60], [0, 60]]}],
}


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", type=int, default=300, help="node budget (default 300)")
    args = parser.parse_args(argv)
    site = parse_site(SITE, source="benchmark")
    t0 = time.perf_counter()
    layout = design_layout(site, LayoutOptions(budget=args.nodes))
    t_layout = time.perf_counter() - t0
    n = len(layout)
    nodes = Nodes(ids=layout.ids, xyz_m=layout.xyz_m, kinds=layout.kinds, boreholes=layout.boreholes,
                  lines=np.arange(2, n + 2), source="layout")
    budget = link_budget_for_site(site)
    t0 = time.perf_counter()
    pairs = build_pair_graph(site, nodes, budget)
    summary = pair_graph_summary(pairs)
    t_pairs = time.perf_counter() - t0
    a, b = np.triu_indices(n, 1)
    t0 = time.perf_counter()
    G = straight_ray_matrix(site.grid(), layout.xyz_m[a], layout.xyz_m[b])
    t_ref = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    grid = site.grid()
    print(f"grid {grid.shape[0]} x {grid.shape[1]} x {grid.shape[2]} = {grid.n_cells:,} cells; "
          f"layout of {n} nodes ({layout.counts()}) in {t_layout:.2f} s")
    print(f"pair graph: {a.size:,} pairs, {summary['pairs']['heard']:,} heard, "
          f"{summary['pairs']['heard_air_flagged']:,} air-flagged, mean degree {summary['degree']['mean']:.1f}: "
          f"{t_pairs:.2f} s")
    print(f"reference: straight-ray matrix of the same pairs ({G.nnz:,} entries): {t_ref:.2f} s")
    print(f"ratio pair graph / reference: {t_pairs / t_ref:.2f}")
    print(f"target: pair graph + coverage <= 30 s on 2 cores; pair graph alone used {100 * t_pairs / 30:.0f} % "
          f"of it; peak memory {peak_mb:.0f} MB")


if __name__ == "__main__":
    main()
