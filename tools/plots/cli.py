"""Command line of single-run figures: ``shearmix plot RUN_DIR``.

    shearmix plot RUN_DIR [--what series|spectra|slices ...] [-o DIR] [--start T]

PNG files (``series.png``, ``spectra.png``, ``slices.png``) go to ``DIR``
(default ``RUN_DIR/figures``). Without ``--what`` every figure the run's files
allow is made and the missing inputs are named. Exit codes: 0 done, 2 bad
input (a run folder without the files a requested figure needs).
"""
from __future__ import annotations

import os
import sys

EXIT_BAD_INPUT = 2

# Read files a running member still holds open for writing (HDF5 locks them by
# default). HDF5 reads this once, when h5py is first imported: hence here.
os.environ.setdefault("HDF5_USE_FILE_LOCKING", "FALSE")
FIGURES = ("series", "spectra", "slices")

__all__ = ["add_arguments", "cmd_plot"]


def _fail(message):
    print(f"shearmix: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT


def _make(what, run_dir, out_dir, start):
    from shearmix.tools.plots import figures as plots
    path = os.path.join(out_dir, f"{what}.png")
    if what == "series":
        return plots.plot_series(run_dir, path, start=start)
    if what == "spectra":
        return plots.plot_spectra(run_dir, path, start=start)
    from shearmix.tools.plots.fields import run_fields
    f = run_fields(run_dir)
    title = plots.run_title(_run_case(run_dir), os.path.basename(os.path.abspath(run_dir)))
    title += f"; t = {f['t']:.4g} ({os.path.basename(f['source'])})"
    return plots.plot_slices(f, f["lengths"], path, title=title)


def _run_case(run_dir):
    """The case a run folder records (``case.yaml``, written by every run), or ``{}``."""
    import yaml
    try:
        with open(os.path.join(run_dir, "case.yaml"), encoding="utf-8") as fh:
            case = yaml.safe_load(fh)
    except (OSError, yaml.YAMLError):
        return {}
    return case if isinstance(case, dict) else {}


def cmd_plot(args):
    """Handler of ``plot``."""
    run_dir = args.run_dir
    if not os.path.isdir(run_dir):
        return _fail(f"{run_dir}: not a run folder")
    out_dir = args.output or os.path.join(run_dir, "figures")
    wanted = args.what or list(FIGURES)
    made, missing = [], []
    for what in wanted:
        try:
            made.append(_make(what, run_dir, out_dir, args.start))
        except (OSError, ValueError) as exc:  # FileNotFoundError, FieldsNotFound, bad files
            if args.what:
                return _fail(str(exc))
            missing.append(f"{what}: {exc}")
    for p in made:
        print(f"wrote {p}")
    for m in missing:
        print(f"skipped {m}")
    return 0 if made else EXIT_BAD_INPUT


def add_arguments(subparsers):
    """Register ``plot`` on the program's subparsers."""
    p = subparsers.add_parser("plot", help="figures of one run as PNG: time series, spectra, slices")
    p.add_argument("run_dir", metavar="RUN_DIR")
    p.add_argument("--what", nargs="+", choices=FIGURES, help="which figures (default: all possible)")
    p.add_argument("--output", "-o", metavar="DIR", help="folder for the PNG files "
                   "(default RUN_DIR/figures)")
    p.add_argument("--start", type=float, metavar="T",
                   help="start of the averaging window (default: MSER detection)")
    p.set_defaults(func=cmd_plot)
