"""``shearmix``: the one command-line door to the engine and the tools.

    shearmix run CASE.yaml [--output DIR] [--set key=value ...] [--restart PATH|latest]
                           [--wall-hours H]
    shearmix info FILE [--verify]
    shearmix check CASE.yaml [--set key=value ...] [--ranks P]
    shearmix keys

Under MPI: ``mpirun -n P shearmix run CASE.yaml``. Exit codes: 0 done, 1 an
unexpected failure, 2 bad input (nothing written), 3 blow-up, 4 stopped early
on the wall-clock budget or SIGTERM/SIGUSR1 with a checkpoint written (restart
it), 5 a checkpoint or snapshot could not be written (the last complete one is
kept). See docs/checkpoints.md.
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys

EXIT_BAD_INPUT = 2

#: optional subcommand families: module with add_arguments(subparsers)
_PLUGINS = ("shearmix.tools.stability.cli", "shearmix.tools.analysis.cli", "shearmix.tools.sweeps.cli", "shearmix.tools.plots.cli")


def _fail(message: str, code: int = EXIT_BAD_INPUT) -> int:
    print(f"shearmix: error: {message}", file=sys.stderr)
    return code


def _load(args):
    from shearmix.solver.case import CaseError, load_case
    try:
        return load_case(args.case, args.set or None), None
    except CaseError as exc:
        return None, str(exc)


def cmd_check(args) -> int:
    from shearmix.solver.sizing import derived
    case, err = _load(args)
    if err:
        return _fail(err)
    info = derived(case, args.ranks)
    print(f"case {case.name} ({args.case}): valid")
    for key, value in info.items():
        if key == "expected memory":
            value = (f"{value / 2 ** 20:.0f} MiB (estimate, with ~250 MiB per rank for "
                     "Python and its libraries)")
        elif key == "bytes per point":
            value = f"{value:.0f}"
        elif isinstance(value, tuple):
            value = " x ".join(f"{v:.6g}" if isinstance(v, float) else str(v) for v in value)
        elif isinstance(value, list):
            value = ", ".join(map(str, value))
        elif isinstance(value, float):
            value = f"{value:.6g}"
        elif value is None:
            value = "-"
        print(f"  {key:34s} {value}")
    if args.ranks and args.ranks not in info["allowed rank counts"]:
        print(f"  warning: {args.ranks} ranks not allowed for this grid")
    for w in case.warnings:
        print(f"  warning: {w}")
    return 0


def cmd_keys(args) -> int:
    from shearmix.solver.case import key_table
    if args.markdown:
        print("| key | default | allowed | meaning |")
        print("|---|---|---|---|")
        for key, default, allowed, doc in key_table():
            print(f"| `{key}` | {default} | {allowed} | {doc} |")
        return 0
    for key, default, allowed, doc in key_table():
        print(f"{key:28s} {default:32s} {allowed}  -- {doc}")
    return 0


def _on_rank0(comm, work):
    """Run ``work()`` on rank 0 and share its result or its error message with all ranks."""
    result, error = None, None
    if comm.rank == 0:
        try:
            result = work()
        except ValueError as exc:  # RestartError, CheckpointError, HeaderError
            error = str(exc)
    return comm.bcast((result, error))


def cmd_run(args) -> int:
    from shearmix.solver.case import CaseError
    from shearmix.solver.compute.parallel import world
    from shearmix.solver.files.series import SERIES_FILE
    from shearmix.solver.grid import GridError, allowed_rank_counts
    from shearmix.solver.physics.initial import InitialStateError

    comm = world()
    rank0 = comm.rank == 0
    if args.wall_hours is not None:
        args.set = (args.set or []) + [f"time.wall_hours={args.wall_hours}"]
    case, err = _load(args)
    if err:
        return _fail(err) if rank0 else EXIT_BAD_INPUT
    if comm.size not in allowed_rank_counts(case.shape):
        msg = (f"{args.case}: grid {case.Nx} x {case.Ny} x {case.Nz} cannot run on "
               f"{comm.size} ranks; allowed: {', '.join(map(str, allowed_rank_counts(case.shape)))}")
        return _fail(msg) if rank0 else EXIT_BAD_INPUT
    out_dir = args.output or case.output_directory
    series = os.path.join(out_dir, SERIES_FILE)
    checked = None
    if args.restart:
        from shearmix.solver.run.restart import check, resolve
        found, msg = _on_rank0(comm, lambda: resolve(args.restart, out_dir))
        if msg:
            return _fail(msg) if rank0 else EXIT_BAD_INPUT
        path, skipped = found
        try:
            checked = check(path, case, comm)
        except ValueError as exc:
            return _fail(str(exc)) if rank0 else EXIT_BAD_INPUT
        from shearmix.solver.files.checkpoint import latest
        own = os.path.join(os.path.realpath(out_dir), "checkpoints")
        newest = latest(own)
        if os.path.realpath(os.path.dirname(os.path.abspath(path))) != own:
            if os.path.exists(series) or newest:
                msg = (f"{out_dir}: already holds a run and {path} is not one of its "
                       "checkpoints; continue it in a new --output folder")
                return _fail(msg) if rank0 else EXIT_BAD_INPUT
        elif newest and os.path.realpath(newest) != os.path.realpath(path):
            # restarting here from an older state would discard (and prune) what followed
            msg = (f"{path}: older than the newest checkpoint {newest} of this run; continue "
                   "from it in a new --output folder, or restart from the newest")
            return _fail(msg) if rank0 else EXIT_BAD_INPUT
    else:
        from shearmix.solver.files.checkpoint import list_checkpoints
        held = SERIES_FILE if os.path.exists(series) else (
            "checkpoints" if list_checkpoints(os.path.join(out_dir, "checkpoints")) else None)
        if held and not case.get("output.overwrite"):
            msg = (f"{out_dir}: already holds a run ({held}); continue it with --restart "
                   "latest, choose another --output or set output.overwrite=true to replace it")
            return _fail(msg) if rank0 else EXIT_BAD_INPUT
        if case.get("initial.kind") in ("file", "eigenmode") and \
            not os.path.exists(case.get("initial.path")):
            msg = f"{case.get('initial.path')}: initial.path: no such perturbation file"
            return _fail(msg) if rank0 else EXIT_BAD_INPUT
    if rank0:
        for w in case.warnings:
            print(f"shearmix: warning: {w}", file=sys.stderr)
    from shearmix.solver.compute.kernels import KernelBackendError
    from shearmix.solver.compute.productpass import PhysicalPassError
    from shearmix.solver.run.simulation import Simulation
    try:
        sim = Simulation(case, comm, initial=checked is None)
    except (InitialStateError, GridError, CaseError, PhysicalPassError,
            KernelBackendError) as exc:
        return _fail(str(exc)) if rank0 else EXIT_BAD_INPUT
    if checked is not None:
        from shearmix.solver.run.restart import RestartError, apply, truncate_series
        try:
            apply(sim, path, checked)
        except RestartError as exc:
            return _fail(str(exc)) if rank0 else EXIT_BAD_INPUT
        if rank0:
            for why in skipped:
                print(f"shearmix: warning: passed over {why}", file=sys.stderr)
            changed = ", ".join(f"{k} {a!r} -> {b!r}" for k, (a, b) in checked["changes"].items())
            print(f"shearmix: restarting from {path} at step {sim.step_count}, t = {sim.t:.10g}"
                  + (f"; changed: {changed}" if changed else ""), flush=True)
            dropped = truncate_series(series, sim.step_count)
            if dropped:
                print(f"shearmix: {series}: dropped {dropped} record(s) from step "
                      f"{sim.step_count} on, written after that checkpoint", flush=True)
        comm.barrier()
    return sim.run(output=out_dir, append=checked is not None)


def cmd_info(args) -> int:
    from shearmix.tools.fileinfo import describe
    try:
        print(describe(args.file, verify=args.verify))
    except ValueError as exc:
        return _fail(str(exc))
    return 0


def build_parser() -> argparse.ArgumentParser:
    from shearmix.solver.version import __version__
    parser = argparse.ArgumentParser(
        prog="shearmix",
        description="DNS of forced stratified shear flow (full Boussinesq and low-Peclet "
                    "models) and the tools around it.")
    parser.add_argument("--version", action="version", version=f"shearmix {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    p = sub.add_parser("run", help="run a case (under mpirun for several ranks)")
    p.add_argument("case", help="case file (YAML)")
    p.add_argument("--output", "-o", help="run folder (default: output.directory or runs/<name>)")
    p.add_argument("--set", action="append", metavar="KEY=VALUE",
                   help="override a case key, e.g. --set parameters.Re=200 (repeatable)")
    p.add_argument("--restart", metavar="PATH|latest",
                   help="continue from a checkpoint file, a run folder's newest one, or "
                        "'latest' (the newest complete checkpoint of the output folder)")
    p.add_argument("--wall-hours", type=float, metavar="H",
                   help="wall-clock budget: write a checkpoint and exit 4 before H hours "
                        "(same as --set time.wall_hours=H)")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("info", help="what a checkpoint or snapshot holds (no fields loaded)")
    p.add_argument("file", help="checkpoint or snapshot file (.h5)")
    p.add_argument("--verify", action="store_true",
                   help="also check every checksum of a checkpoint (reads the fields)")
    p.set_defaults(func=cmd_info)

    p = sub.add_parser("check", help="validate a case and print its derived quantities")
    p.add_argument("case")
    p.add_argument("--set", action="append", metavar="KEY=VALUE")
    p.add_argument("--ranks", type=int, help="rank count to size the run for")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("keys", help="list every case-file key with its default")
    p.add_argument("--markdown", action="store_true", help="as a Markdown table")
    p.set_defaults(func=cmd_keys)

    for name in _PLUGINS:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name != name:  # a broken plugin must fail loudly, not vanish
                raise
            continue
        if hasattr(module, "add_arguments"):
            module.add_arguments(sub)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    return int(args.func(args) or 0)


if __name__ == "__main__":
    sys.exit(main())
