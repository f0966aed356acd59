#!/bin/bash
# Coverage of `latens infer` on one fixed planet: the demo scenario
# (scenarios/demo.toml) simulated with 12 survey noise seeds, each searched
# at the command's defaults (500 nulls, as the demo). Needs a release build
# (cargo build --release). Then:
#   python3 tests/coverage/analyse.py DIR       (mocpy, astropy, numpy)
#   cargo run --release --example truth_score -- DIR/simN   (the kernel's
#     chi-square drop at the true planet against the basins)
# Results: docs/validation.md. About 1 minute per seed on 2 cores.
set -u
ROOT="$(cd "$(dirname "$0")/../.." && pwd)"
OUT="${1:-output/demo-seeds}"
mkdir -p "$OUT" && cd "$OUT"
LATENS="$ROOT/target/release/latens"
for seed in 1 2 3 4 5 6 7 8 9 10 11 12; do
  [ -f inf$seed/summary.json ] && continue
  sed "s/^seed = 2026/seed = $seed/" "$ROOT"/scenarios/demo.toml > demo$seed.toml
  "$LATENS" -q simulate demo$seed.toml --out sim$seed || continue
  /usr/bin/time -f "seed $seed %e s" "$LATENS" -q infer --obs sim$seed/observations.csv --sites sim$seed/sites.csv \
     --nulls 500 --seed $seed --max-eccentricity 0.6 \
     --truth sim$seed/truth.json --charts none --out inf$seed 2>> times.log
done
