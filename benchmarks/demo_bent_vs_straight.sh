#!/usr/bin/env bash
# The bent-ray check of the demo quarry: the demo chain (`voidcube demo`) lays out the
# nodes, simulates picks with bent rays (true first arrivals, air waves included) and
# inverts them with bent rays; this script inverts the same picks with straight rays too
# and finds the voids in both. Prints the misfits and the void tables to compare with
# demo_site/truth.yaml (air-filled ellipsoid under the haul road, centre (42, 16, 90) m,
# semi-axes 4 x 3.5 x 2.5 m, 146.6 m^3). About 1 minute on 2 cores (up to 5 on a busy machine).
# Run from the repository folder after `pip install .`: bash benchmarks/demo_bent_vs_straight.sh [OUT]
set -euo pipefail
out="${1:-demo_bent_check}"
mkdir -p "$out"
voidcube demo demo_site --out "$out/chain" --quiet | sed -n '4,7p'
common=(--site demo_site/site.yaml --nodes "$out/chain/plan/nodes.csv" --picks "$out/chain/picks.csv")
echo "straight rays:"
voidcube reconstruct invert "${common[@]}" --out "$out/straight" --rays straight --invert-unusable --quiet \
    | grep -E "misfit|picks inverted"
voidcube reconstruct voids "$out/straight" --no-pictures --quiet | sed -n 1p
cut -d, -f1-7 "$out/straight/voids.csv" | sed -n 1,4p
echo "bent rays (the chain's inversion, $out/chain/model):"
python3 -c "import json, sys; m = json.load(open(sys.argv[1]))['misfit']; print(f\"misfit: RMS {m['rms_ns']:.3f} ns\")" \
    "$out/chain/model/summary.json"
cut -d, -f1-7 "$out/chain/model/voids.csv" | sed -n 1,4p
