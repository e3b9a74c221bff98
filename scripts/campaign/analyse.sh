#!/usr/bin/env bash
# The compact results of the Re = 50 campaign (scripts/campaign/run.sh) for
# docs/campaign.md: tables, fits, regime evidence, growth phase and small figures.
#
#   scripts/campaign/analyse.sh [OUT]     (default OUT: docs/campaign)
#
# Reads runs/campaign-re50/ (never committed); writes only into OUT, which holds
# what is committed: summary.csv, fits.csv, fits-stratified.csv, extras.csv,
# evidence.md, growth.txt and growth.json, and the PNGs.
set -euo pipefail
ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
VENV=${SHEARMIX_VENV:-$ROOT/.venv}
SM="$VENV/bin/shearmix"
SWEEP="$ROOT/configs/campaign/re50-bpe.yaml"
DIR="$ROOT/runs/campaign-re50"
OUT=${1:-$ROOT/docs/campaign}
# the stratified-turbulence range of the fits (BPe): the decade around the spin-up's
# mixing-efficiency peak, fixed before the windows ran
LO=${FIT_LO:-1}
HI=${FIT_HI:-30}
mkdir -p "$OUT" "$DIR/analysis"

"$SM" sweep summarize "$SWEEP" --output "$DIR/analysis" > "$DIR/analysis/summarize.txt"
cp "$DIR/analysis/summary.csv" "$DIR/analysis/fits.csv" "$OUT/"
cp "$DIR/analysis/regime-map.png" "$DIR/analysis/scaling.png" "$OUT/"
"$SM" sweep summarize "$SWEEP" --range "$LO" "$HI" --output "$DIR/analysis/stratified" --no-plots \
    > "$DIR/analysis/stratified.txt"
cp "$DIR/analysis/stratified/fits.csv" "$OUT/fits-stratified.csv"
"$SM" regimes evidence "$OUT/summary.csv" --markdown > "$OUT/evidence.md"
# the jets' vertical scale is not among the sweep's fitted quantities: fitted here
{ "$SM" fit "$OUT/summary.csv" --x BPe --y Lz_jets --range "$LO" "$HI"
  "$SM" fit "$OUT/summary.csv" --x BPe --y Lz_jets; } 2>/dev/null | grep -v "segment" > "$OUT/fits-jets.txt"

# the extras, each beside its member: finer grid, full model
rows=()
for run in "$DIR"/extras/*/; do rows+=("$run"); done
if [ "${#rows[@]}" -gt 0 ]; then
    "$SM" summary "${rows[@]}" --csv "$OUT/extras.csv" > "$DIR/analysis/extras.txt"
fi

# the growth phase of the first member against linear theory (the eigenproblem of
# the 96 x 48 x 48 box takes several minutes: kept if growth.json exists)
if [ -d "$DIR/growth" ] && [ ! -f "$OUT/growth.json" ]; then
    "$SM" growth "$DIR/growth" --json "$OUT/growth.json" > "$OUT/growth.txt"
fi
if [ -f "$OUT/growth.json" ]; then
    "$VENV/bin/python" "$ROOT/scripts/campaign/growth_plot.py" "$DIR/growth" "$OUT/growth.json" \
        "$OUT/growth.png"
fi

# slices of u and w of one member per regime: the first member carrying each label
"$VENV/bin/python" - "$OUT/summary.csv" > "$DIR/analysis/per-regime.txt" <<'PY'
import csv, sys
seen = {}
for row in csv.DictReader(open(sys.argv[1])):
    seen.setdefault(row.get("regime", ""), row["member"])
for label, name in seen.items():
    print(label, name)
PY
while read -r label name; do
    [ -n "$label" ] || continue
    "$SM" plot "$DIR/runs/$name" --what slices --output "$DIR/analysis/slices-$name" > /dev/null
    cp "$DIR/analysis/slices-$name/"*slices*.png "$OUT/slices-$label-$name.png"
done < "$DIR/analysis/per-regime.txt"
ls -l "$OUT"
