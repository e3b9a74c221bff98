#!/usr/bin/env bash
# The Re = 50 regime campaign of docs/campaign.md, end to end, on this machine.
#
#   scripts/campaign/run.sh [spinup|windows|extras|growth|all]   (default: all)
#
# spinup   the chained sweep configs/campaign/re50-bpe.yaml (each member 30 time
#          units beyond its lower neighbour's end; the first from laminar flow + noise)
# windows  each member restarted from its last checkpoint with two tracers
#          (Sc 1 and Sc 10) and run WINDOW more time units: the averaging window
# extras   one member again at 128 x 64 x 64 and one in the full Boussinesq model
#          (B = BPe/Pe), both seeded from that member's spin-up checkpoint and run
#          EXTRA_WINDOW time units (to be compared with the member's own first
#          EXTRA_WINDOW of its window)
# growth   the first member's case from t = 0 to 6 (laminar flow + noise to turbulence)
#          with the growth-phase diagnostics
# Every stage skips what is already done, so the script can be run again after an
# interruption. Runs go to runs/campaign-re50/ (never committed).
set -euo pipefail
ROOT=$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)
VENV=${SHEARMIX_VENV:-$ROOT/.venv}
SM="$VENV/bin/shearmix"
MPI="$VENV/bin/mpiexec"
SWEEP="$ROOT/configs/campaign/re50-bpe.yaml"
DIR="$ROOT/runs/campaign-re50"
WINDOW=${WINDOW:-120}
EXTRA_WINDOW=${EXTRA_WINDOW:-30}
PARALLEL=${PARALLEL:-2}
FINE_MEMBER=${FINE_MEMBER:-BPe1}
TWIN_MEMBER=${TWIN_MEMBER:-BPe10}
TRACERS=(--set tracers.sc1.Sc=1 --set tracers.sc10.Sc=10)
export OMP_NUM_THREADS=1

# the time of a run folder's newest checkpoint
last_time() {
    "$VENV/bin/python" - "$1" <<'PY'
import sys
from shearmix.solver.files.checkpoint import FOLDER, list_checkpoints
import h5py, os
(_, path) = list_checkpoints(os.path.join(sys.argv[1], FOLDER))[-1]
with h5py.File(path, "r") as fh:
    print(float(fh.attrs["t"]))
PY
}

# the path of a run folder's newest checkpoint
newest_checkpoint() {
    "$VENV/bin/python" - "$1" <<'PY'
import os, sys
from shearmix.solver.files.checkpoint import FOLDER, list_checkpoints
print(list_checkpoints(os.path.join(sys.argv[1], FOLDER))[-1][1])
PY
}

spinup() { "$SM" sweep run "$SWEEP"; }

window_one() {  # member
    local m=$1 run="$DIR/runs/$1" t0 t1
    if [ -f "$run/window.done" ]; then return 0; fi
    if [ ! -f "$run/window.start" ]; then
        # the spin-up's end, kept aside: the extras start from it, and the window's
        # checkpoints replace it in the run folder
        last_time "$run" > "$run/window.start"
        cp "$(newest_checkpoint "$run")" "$run/spinup-end.h5"
    fi
    t0=$(cat "$run/window.start")
    t1=$("$VENV/bin/python" -c "print($t0 + $WINDOW)")
    # done only when the run reached t1 (a stopped run exits 0 too, so check the time)
    "$SM" run "$DIR/cases/$m.yaml" --output "$run" --restart latest \
        --set time.t_end="$t1" "${TRACERS[@]}" >> "$run/window.log" 2>&1 &&
        "$VENV/bin/python" -c "import sys; sys.exit(0 if $(last_time "$run") >= $t1 - 1e-9 else 1)" &&
        touch "$run/window.done"
}

windows() {
    export -f window_one last_time newest_checkpoint
    export SM VENV DIR WINDOW
    export TRACERS_STR="${TRACERS[*]}"
    "$VENV/bin/python" -c "import yaml, sys
print('\n'.join(m['name'] for m in yaml.safe_load(open(sys.argv[1]))['members']))" \
        "$DIR/manifest.yaml" > "$DIR/members.txt"
    xargs -P "$PARALLEL" -I{} bash -c 'TRACERS=($TRACERS_STR); window_one {}' < "$DIR/members.txt"
}

extras() {
    local src="$DIR/runs/$FINE_MEMBER" t0 ckpt
    t0=$(cat "$src/window.start")
    mkdir -p "$DIR/extras"
    if [ ! -f "$DIR/extras/$FINE_MEMBER-fine.done" ]; then
        "$MPI" -n 2 "$SM" run "$DIR/cases/$FINE_MEMBER.yaml" --output "$DIR/extras/$FINE_MEMBER-fine" \
            --restart "$src/spinup-end.h5" --set grid.Nx=128 --set grid.Ny=64 --set grid.Nz=64 \
            --set time.t_end="$("$VENV/bin/python" -c "print($t0 + $EXTRA_WINDOW)")" "${TRACERS[@]}" \
            > "$DIR/extras/$FINE_MEMBER-fine.log" 2>&1
        touch "$DIR/extras/$FINE_MEMBER-fine.done"
    fi
    src="$DIR/runs/$TWIN_MEMBER"
    t0=$(cat "$src/window.start")
    if [ ! -f "$DIR/extras/$TWIN_MEMBER-full.done" ]; then
        local bpe pe
        bpe=$("$VENV/bin/python" -c "import yaml; print(yaml.safe_load(open('$DIR/cases/$TWIN_MEMBER.yaml'))['parameters']['BPe'])")
        pe=$("$VENV/bin/python" -c "import yaml; print(yaml.safe_load(open('$DIR/cases/$TWIN_MEMBER.yaml'))['parameters']['Pe'])")
        "$MPI" -n 2 "$SM" run "$DIR/cases/$TWIN_MEMBER.yaml" --output "$DIR/extras/$TWIN_MEMBER-full" \
            --restart "$src/spinup-end.h5" --set model=boussinesq \
            --set parameters.B="$("$VENV/bin/python" -c "print($bpe / $pe)")" --set parameters.BPe=null \
            --set time.t_end="$("$VENV/bin/python" -c "print($t0 + $EXTRA_WINDOW)")" "${TRACERS[@]}" \
            > "$DIR/extras/$TWIN_MEMBER-full.log" 2>&1
        touch "$DIR/extras/$TWIN_MEMBER-full.done"
    fi
}

growth() {
    local first run="$DIR/growth"
    first=$(head -1 "$DIR/members.txt")
    if [ -f "$run.done" ]; then return 0; fi
    "$MPI" -n 2 "$SM" run "$DIR/cases/$first.yaml" --output "$run" --set time.t_end=6 \
        --set output.diagnostics_every=2 --set output.overwrite=true > "$run.log" 2>&1
    touch "$run.done"
}

case "${1:-all}" in
    spinup) spinup ;;
    windows) windows ;;
    extras) extras ;;
    growth) growth ;;
    all) spinup; windows; extras; growth ;;
    *) echo "run.sh: stage must be spinup, windows, extras, growth or all, got '$1'" >&2; exit 2 ;;
esac
