"""The demo's forward-model floor: the truth model on the model grid against the picks' grid.

The demo's picks are simulated on a grid ``refine`` times finer than the
model grid (demo_site/truth.yaml), so that inverting them is not inverting
the inversion's own numbers. How well can any model on the model grid
explain them? This script computes first arrivals of all pairs of a node
table through the truth model painted on the model grid and on the
simulation grid, noise-free, with and without the bodies, and prints the
differences and the chi-square per pick they alone would give at the demo's
pick uncertainty. The truth painted on the coarse grid is not the best model
there, but a floor far above 1 says the target chi^2/N = 1 is out of reach
of the model grid, whatever the inversion does.

Measured (this machine, 2026-12-04, the demo's 60-node layout, 2,278 pairs):
with the bodies RMS 1.46 ns, chi^2/N 8.5 at 0.5 ns (pairs within 6 m of the
cavity's centre 2.9 ns RMS, beyond 12 m 0.6 ns); without the bodies RMS
0.55 ns, chi^2/N 1.2, 4.1 ns at most: pairs with a node on a surface and the
node in the inclined hole under the upper bench, on the line where the air
waves through the bench face and the bench top meet
(benchmarks/bench_bench_edge.py). The bent-ray inversion of the demo's picks
stalled at chi^2/N 14.3 after 6 iterations (RMS 1.89 ns; no step lowered the
misfit in the 7th).

Run: ``python3 benchmarks/bench_demo_floor.py --nodes demo_output/plan/nodes.csv``
(the node table written by ``voidcube demo``).
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # run from a checkout too

from plan.synthetic.simulate import all_pairs, refined_grid  # noqa: E402
from plan.synthetic.truth import load_truth, truth_velocity  # noqa: E402
from reconstruct.forward.eikonal import EikonalOptions  # noqa: E402
from reconstruct.forward.first_arrivals import first_arrival_times, unique_pairs  # noqa: E402
from reconstruct.io.site import load_site  # noqa: E402
from reconstruct.io.tables import read_nodes  # noqa: E402
from reconstruct.model.grid import ground_mask  # noqa: E402
from reconstruct.model.placement import place_nodes  # noqa: E402
from reconstruct.parallel import Executor  # noqa: E402

DEMO = Path(__file__).resolve().parents[1] / "demo_site"


def pair_times(site, truth, nodes, refine):
    grid = refined_grid(site.grid(), refine)
    ground = ground_mask(grid, site.ground.elevation_m)
    xyz = place_nodes(nodes, grid, ground).xyz_m
    velocity = truth_velocity(truth, grid, ground, site.rock.velocity_m_per_ns)
    tx, rx = all_pairs(len(nodes), both_directions=False, xyz_m=xyz)
    pair_a, pair_b, pick_pair = unique_pairs(tx, rx)
    times = first_arrival_times(grid, 1.0 / velocity, xyz, pair_a, pair_b, eikonal_options=EikonalOptions(),
                                executor=Executor(kind="processes"))
    return times[pick_pair]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nodes", required=True, help="node table of the demo's layout (CSV)")
    parser.add_argument("--site", default=str(DEMO / "site.yaml"))
    parser.add_argument("--truth", default=str(DEMO / "truth.yaml"))
    args = parser.parse_args(argv)
    site, truth, nodes = load_site(args.site), load_truth(args.truth), read_nodes(args.nodes)
    for label, model in (("with the bodies", truth), ("without the bodies", dataclasses.replace(truth, bodies=()))):
        coarse = pair_times(site, model, nodes, 1)
        fine = pair_times(site, model, nodes, model.refine)
        d = coarse - fine
        print(f"{label}: {d.size} pairs, model grid minus simulation grid: median {np.median(d):+.3f} ns, "
              f"RMS {np.sqrt(np.mean(d**2)):.3f} ns, 95th percentile of |d| {np.percentile(abs(d), 95):.3f} ns, "
              f"range {d.min():+.2f} .. {d.max():+.2f} ns; chi^2/N at {model.noise_sigma_ns:g} ns: "
              f"{np.mean((d / model.noise_sigma_ns) ** 2):.2f}")


if __name__ == "__main__":
    main()
