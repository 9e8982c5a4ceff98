#!/usr/bin/env bash
# The bent-ray check of the demo quarry: picks simulated with bent rays (true first
# arrivals, air waves included), inverted with straight and with bent rays, voids
# found in both. Prints the misfits and the void tables to compare with
# demo_site/truth.yaml (air-filled ellipsoid, centre (42, 16, 90) m, semi-axes
# 4 x 3.5 x 2.5 m, 146.6 m^3). About 10 minutes on 2 cores.
# Run from the repository folder after `pip install .`: bash benchmarks/demo_bent_vs_straight.sh [OUT]
set -euo pipefail
out="${1:-demo_bent_check}"
mkdir -p "$out"
common=(--site demo_site/site.yaml --nodes demo_site/nodes.csv)
plan simulate "${common[@]}" --truth demo_site/truth.yaml --out "$out/picks_bent.csv" --quiet
for rays in straight bent; do
  extra=()
  [ "$rays" = bent ] && extra=(--iterations 3)
  reconstruct invert "${common[@]}" --picks "$out/picks_bent.csv" --out "$out/$rays" --rays "$rays" \
      --accept-flags --quiet "${extra[@]}" | grep -E "misfit|picks inverted"
  reconstruct voids "$out/$rays" --no-pictures --quiet | head -1
  cut -d, -f1-7 "$out/$rays/voids.csv" | head -4
done
