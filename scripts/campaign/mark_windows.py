"""Record the window segment in the campaign's time series written before a tracer
added at a restart began one (engine before that change; see docs/campaign.md).

    python scripts/campaign/mark_windows.py RUNS_DIR      (e.g. runs/campaign-re50/runs)

For each member whose series has no segment at its window's start (the time in
``window.start``), adds one beginning at the first record that has the tracers,
with the case of the window's newest checkpoint. Idempotent; writes nothing else.
"""
from __future__ import annotations

import glob
import os
import sys

import h5py
import numpy as np

from shearmix.solver.files.checkpoint import FOLDER, list_checkpoints
from shearmix.solver.files.series import SERIES_FILE, add_segment, segments_of


def mark(run: str) -> str:
    t0 = float(open(os.path.join(run, "window.start")).read())
    with h5py.File(list_checkpoints(os.path.join(run, FOLDER))[-1][1], "r") as fh:
        case = fh.attrs["case"]
        case = case.decode() if isinstance(case, bytes) else str(case)
    with h5py.File(os.path.join(run, SERIES_FILE), "r+") as fh:
        segs = segments_of(fh.attrs)
        if any(abs(s["t"] - t0) < 1.0 for s in segs if s["t"] >= t0 - 1.0):
            return f"{run}: window segment already recorded"
        names = [n for n in fh if n.startswith("c_rms.")]
        if not names:
            return f"{run}: no tracer columns; nothing to mark"
        first = int(np.flatnonzero(np.isfinite(fh[names[0]][()]) & (fh["t"][()] >= t0 - 1e-9))[0])
        add_segment(fh.attrs, int(fh["step"][first]), float(fh["t"][first]), case)
        return f"{run}: window segment from t = {float(fh['t'][first]):.6g} (step {int(fh['step'][first])})"


if __name__ == "__main__":
    for run in sorted(glob.glob(os.path.join(sys.argv[1], "*", ""))):
        if os.path.exists(os.path.join(run, "window.start")):
            print(mark(run.rstrip("/")))
