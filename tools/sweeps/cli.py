"""Command line of sweeps: ``shearmix sweep expand|run|status|summarize|batch SWEEP.yaml``.

    shearmix sweep expand SWEEP.yaml
    shearmix sweep run SWEEP.yaml [--ranks R] [--parallel N] [--only NAME ...]
                       [--retry] [--launcher 'srun -n {ranks}'] [--wall-hours H]
    shearmix sweep status SWEEP.yaml
    shearmix sweep summarize SWEEP.yaml [--start T] [--range LO HI] [--regime LABEL]
                       [--thresholds FILE] [--no-plots]
    shearmix sweep batch SWEEP.yaml --system slurm|pbs [--walltime HH:MM:SS]
                       [--ranks R] [--margin-minutes M] [--max-resubmits N]
                       [--queue Q] [--account A] [--submit]

Exit codes: 0 done, 2 bad input (nothing written), 1 some member failed
(``run``) or a summary could not be made.
"""
from __future__ import annotations

import os
import sys

EXIT_BAD_INPUT = 2

# Read files a running member still holds open for writing (HDF5 locks them by
# default). HDF5 reads this once, when h5py is first imported: hence here.
os.environ.setdefault("HDF5_USE_FILE_LOCKING", "FALSE")

__all__ = ["add_arguments"]


def _fail(message):
    print(f"shearmix: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT


def _load(args):
    from shearmix.tools.sweeps.spec import SweepError, load_sweep
    try:
        return load_sweep(args.sweep), None
    except SweepError as exc:
        return None, str(exc)


def cmd_expand(args):
    from shearmix.tools.sweeps.spec import SweepError, expand
    sweep, err = _load(args)
    if err:
        return _fail(err)
    try:
        expand(sweep)
    except (SweepError, OSError) as exc:
        return _fail(str(exc))
    for m in sweep.members:
        note = f"  (starts from {m.chain_from})" if m.chain_from else ""
        print(f"  {m.name:24s} {os.path.relpath(sweep.case_path(m))}{note}")
    return 0


def cmd_run(args):
    from shearmix.tools.sweeps.launch import run_members
    from shearmix.tools.sweeps.spec import SweepError, expand
    sweep, err = _load(args)
    if err:
        return _fail(err)
    ranks = args.ranks or sweep.launch["ranks"]
    parallel = args.parallel or sweep.launch["parallel"]
    if ranks < 1 or parallel < 1:
        return _fail("--ranks and --parallel must be at least 1")
    if args.only:
        for name in args.only:
            try:
                sweep.member(name)
            except SweepError as exc:
                return _fail(str(exc))
    sets = list(args.set or [])
    if args.wall_hours is not None:
        if not args.wall_hours > 0:
            return _fail(f"--wall-hours must be > 0, got {args.wall_hours}")
        sets.append(f"time.wall_hours={args.wall_hours}")
    try:
        expand(sweep, log=lambda m: None)  # idempotent: refuses to change members with results
        codes = run_members(sweep, args.only, ranks, parallel, args.launcher, args.retry, sets)
    except (SweepError, RuntimeError, OSError) as exc:
        return _fail(str(exc))
    if any(c == 4 for c in codes.values()):
        return 4  # a batch job resubmits itself on this code
    return 0 if all(c == 0 for c in codes.values()) else 1


def cmd_status(args):
    from shearmix.tools.sweeps.status import format_table, sweep_status
    sweep, err = _load(args)
    if err:
        return _fail(err)
    rows = sweep_status(sweep)
    print(f"sweep {sweep.name}: {len(rows)} members in {sweep.directory}")
    print(format_table(rows))
    counts = {}
    for r in rows:
        counts[r["state"]] = counts.get(r["state"], 0) + 1
    print("  " + ", ".join(f"{n} {s}" for s, n in counts.items()))
    return 0


def cmd_summarize(args):
    from shearmix.tools.analysis.regimes import RegimeThresholds
    from shearmix.tools.sweeps.summary import summarize_sweep
    sweep, err = _load(args)
    if err:
        return _fail(err)
    try:
        th = RegimeThresholds.from_yaml(args.thresholds) if args.thresholds else None
    except (ValueError, OSError) as exc:
        return _fail(str(exc))
    try:
        result = summarize_sweep(sweep, start=args.start, x_range=args.range, regime=args.regime,
                                 thresholds=th, plots=not args.no_plots, out_dir=args.output)
    except (ValueError, OSError) as exc:
        return _fail(str(exc))
    return 0 if len(result["rows"]) > len(result["skipped"]) else 1


def cmd_batch(args):
    from shearmix.tools.sweeps.batch import BatchError, submit, write_batch_scripts
    sweep, err = _load(args)
    if err:
        return _fail(err)
    try:
        paths = write_batch_scripts(sweep, args.system, walltime=args.walltime,
                                    ranks=args.ranks or sweep.launch["ranks"],
                                    margin_minutes=args.margin_minutes,
                                    max_resubmits=args.max_resubmits, queue=args.queue,
                                    account=args.account, only=args.only)
    except BatchError as exc:
        return _fail(str(exc))
    for p in paths:
        print(f"  {os.path.relpath(p)}")
    if args.submit:
        return submit(paths, args.system)
    print(f"submit with: {'sbatch' if args.system == 'slurm' else 'qsub'} <script> "
          "(or rerun with --submit)")
    return 0


def add_arguments(subparsers):
    """Register ``sweep`` and its actions on the program's subparsers."""
    p = subparsers.add_parser("sweep", help="parameter sweeps: expand, run, status, summarize, batch")
    acts = p.add_subparsers(dest="action", metavar="ACTION")
    acts.required = True

    a = acts.add_parser("expand", help="write one case file and run folder per member, and a manifest")
    a.add_argument("sweep", metavar="SWEEP.yaml")
    a.set_defaults(func=cmd_expand)

    a = acts.add_parser("run", help="run or resume members on this machine")
    a.add_argument("sweep", metavar="SWEEP.yaml")
    a.add_argument("--ranks", type=int, help="MPI ranks per member (default: launch.ranks or 1)")
    a.add_argument("--parallel", type=int, help="members at once (default: launch.parallel or 1)")
    a.add_argument("--only", nargs="+", metavar="NAME", help="only these members")
    a.add_argument("--retry", action="store_true", help="run failed members again")
    a.add_argument("--launcher", metavar="CMD",
                   help="MPI launch prefix with {ranks}, e.g. 'srun -n {ranks}'")
    a.add_argument("--wall-hours", type=float, metavar="H", help="wall-clock budget of each run")
    a.add_argument("--set", action="append", metavar="KEY=VALUE", help="override for every run")
    a.set_defaults(func=cmd_run)

    a = acts.add_parser("status", help="state, step, time and last checkpoint of every member")
    a.add_argument("sweep", metavar="SWEEP.yaml")
    a.set_defaults(func=cmd_status)

    a = acts.add_parser("summarize", help="table of all members, power-law fits, regime map, plots")
    a.add_argument("sweep", metavar="SWEEP.yaml")
    a.add_argument("--start", type=float, metavar="T", help="steady start time for every run")
    a.add_argument("--range", nargs=2, type=float, metavar=("LO", "HI"), help="fit only LO <= BPe <= HI")
    a.add_argument("--regime", metavar="LABEL", help="fit only runs with this regime label")
    a.add_argument("--thresholds", metavar="FILE", help="regime thresholds (YAML mapping)")
    a.add_argument("--output", "-o", metavar="DIR", help="where the table and figures go "
                   "(default: the sweep folder)")
    a.add_argument("--no-plots", action="store_true", help="table and fits only")
    a.set_defaults(func=cmd_summarize)

    a = acts.add_parser("batch", help="write SLURM or PBS job scripts that resubmit themselves")
    a.add_argument("sweep", metavar="SWEEP.yaml")
    a.add_argument("--system", required=True, choices=("slurm", "pbs"))
    a.add_argument("--walltime", default="12:00:00", metavar="HH:MM:SS", help="job wall time")
    a.add_argument("--ranks", type=int, help="MPI ranks per member")
    a.add_argument("--margin-minutes", type=float, default=10.0, metavar="M",
                   help="the run stops this long before the job's wall time (default 10)")
    a.add_argument("--max-resubmits", type=int, default=20, metavar="N",
                   help="give up after this many resubmissions (default 20)")
    a.add_argument("--queue", help="partition (SLURM) or queue (PBS)")
    a.add_argument("--account", help="account to charge")
    a.add_argument("--only", nargs="+", metavar="NAME", help="only these members")
    a.add_argument("--submit", action="store_true", help="submit the scripts now")
    a.set_defaults(func=cmd_batch)
