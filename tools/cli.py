"""``shearmix``: the one command-line door to the engine and the tools.

    shearmix run CASE.yaml [--output DIR] [--set key=value ...] [--restart PATH|latest]
                           [--wall-hours H] [--no-memory-check]
    shearmix info FILE [--verify]
    shearmix check CASE.yaml [--set key=value ...] [--ranks P] [--ranks-per-node N]
    shearmix keys

Under MPI: ``mpirun -n P shearmix run CASE.yaml``. Exit codes: 0 done, 1 an
unexpected failure, 2 bad input (nothing written), 3 blow-up, 4 stopped early
on the wall-clock budget or SIGTERM/SIGUSR1 with a checkpoint written (restart
it), 5 a checkpoint or snapshot could not be written (the last complete one is
kept), 141 the reader of the output went away (``shearmix keys | head``). See
docs/checkpoints.md.
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


def _shown(value) -> str:
    """A case value as a user wrote it; an unset one as ``unset``, not Python's ``None``."""
    return "unset" if value is None else repr(value)


#: environment variables read once, as defaults of ``--set`` for the engine's
#: ``compute.*`` keys (``--set`` wins); SHEARMIX_PHYSICAL_PASS is the old name
ENVIRONMENT_KEYS = (("SHEARMIX_PRODUCT_PASS", "compute.product_pass"),
                    ("SHEARMIX_PHYSICAL_PASS", "compute.product_pass"),
                    ("SHEARMIX_TRANSPOSE", "compute.transpose"),
                    ("SHEARMIX_KERNELS", "compute.kernels"))


def environment_settings(environ) -> list[str]:
    """``key=value`` settings from the variables of :data:`ENVIRONMENT_KEYS` that are
    set; a value the key does not allow raises ValueError naming the variable."""
    from shearmix.solver.case import SCHEMA
    settings = []
    for var, key in ENVIRONMENT_KEYS:
        value = environ.get(var, "")
        if not value:
            continue
        allowed = SCHEMA[key].choices
        if value not in allowed:
            raise ValueError(f"{var}={value!r}: allowed are {', '.join(allowed)}")
        settings.append(f"{key}={value}")
    return settings


def _load(args):
    from shearmix.solver.case import CaseError, load_case
    try:
        overrides = environment_settings(os.environ) + (args.set or [])
        return load_case(args.case, overrides or None), None
    except ValueError as exc:  # CaseError, or a bad environment setting
        return None, str(exc)


def cmd_check(args) -> int:
    from shearmix.solver.sizing import derived, memory_per_node, memory_shortfall, node_memory
    case, err = _load(args)
    if err:
        return _fail(err)
    info = derived(case, args.ranks)
    print(f"case {case.name} ({args.case}): valid")
    for key, value in info.items():
        if key == "tracers":
            print(f"  {'passive tracers':34s} {len(value) or 'none'}")
            for line in value:
                print(f"    {line}")
            continue
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
    ranks = args.ranks or 1
    per_node = min(args.ranks_per_node or ranks, ranks)
    node = node_memory()
    if node is not None:
        print(f"  {'memory per node':34s} {memory_per_node(case, ranks, per_node) / 2 ** 20:.0f} "
              f"MiB ({per_node} of {ranks} rank(s) on a node); this node: "
              f"{node['available'] / 2 ** 20:.0f} MiB available of {node['total'] / 2 ** 20:.0f}")
    short = memory_shortfall(case, ranks, per_node, node)
    if short:
        print(f"  warning: {short}: 'shearmix run' will refuse it (--no-memory-check)")
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
        except ValueError as exc:  # RestartError, CheckpointError, HeaderError, RunFolderError
            error = str(exc)
    return comm.bcast((result, error))


def _memory_check(case, comm, allow: bool):
    """The refusal message when the run would not fit its nodes' memory (None if it fits)."""
    from shearmix.solver.sizing import memory_shortfall
    mine = memory_shortfall(case, comm.size, comm.ranks_on_node())
    messages = comm.gather(mine)
    message = comm.bcast(next((m for m in messages if m), None) if comm.rank == 0 else None)
    if message is None or allow:
        return None
    return f"{message}; refusing to start (--no-memory-check runs it anyway)"


def _choose_checkpoint(spec, case, out_dir, comm):
    """``(path, checked, skipped, notes)`` of the checkpoint to continue from, or an error
    message; collective (rank 0 reads the folder)."""
    from shearmix.solver.run.restart import check, resolve
    from shearmix.solver.run.rundir import check_restart
    found, msg = _on_rank0(comm, lambda: resolve(spec, out_dir))
    if msg:
        return None, msg
    path, skipped = found
    try:
        checked = check(path, case, comm)
    except ValueError as exc:
        return None, str(exc)
    notes, msg = _on_rank0(comm, lambda: check_restart(case, out_dir, path,
                                                       int(checked["header"]["step"])))
    if msg:
        return None, msg
    return (path, checked, skipped, notes), None


def _set_aside_quietly(path):
    from shearmix.solver.files.checkpoint import set_aside
    try:
        return set_aside(path, "damaged")
    except OSError:
        return None


def _restore(sim, spec, case, out_dir, chosen, comm):
    """Load the chosen checkpoint into ``sim``; one whose columns fail their checksums is
    set aside as ``*.damaged`` (in its own run folder) and, for ``latest`` or a folder,
    the next older one is taken. Returns ``(chosen, warnings)`` or ``(None, message)``."""
    from shearmix.solver.run.restart import RestartError, apply
    warnings = []
    own = os.path.realpath(os.path.join(out_dir, "checkpoints"))
    named_file = spec != "latest" and not os.path.isdir(spec)
    while True:
        path, checked = chosen[0], chosen[1]
        try:
            apply(sim, path, checked)
            return chosen, warnings
        except RestartError as exc:
            message = str(exc)
        if os.path.realpath(os.path.dirname(os.path.abspath(path))) != own:
            return None, message
        aside, _ = _on_rank0(comm, lambda: _set_aside_quietly(path))
        warnings.append(f"{message}; set aside as {aside}" if aside else message)
        if named_file:
            return None, f"{warnings[-1]}; continue with --restart latest"
        chosen, msg = _choose_checkpoint(spec, case, out_dir, comm)
        if msg:
            return None, f"{warnings[-1]}; {msg}"


def cmd_run(args) -> int:
    from shearmix.solver.case import CaseError
    from shearmix.solver.compute.parallel import world
    from shearmix.solver.grid import GridError, allowed_rank_counts
    from shearmix.solver.physics.initial import InitialStateError
    from shearmix.solver.run.rundir import check_new

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
    chosen = None
    if args.restart:
        chosen, msg = _choose_checkpoint(args.restart, case, out_dir, comm)
    else:
        _, msg = _on_rank0(comm, lambda: check_new(case, out_dir))
        if not msg and case.get("initial.kind") in ("file", "eigenmode") and \
                not os.path.exists(case.get("initial.path")):
            msg = f"{case.get('initial.path')}: initial.path: no such perturbation file"
    msg = msg or _memory_check(case, comm, args.no_memory_check)
    if msg:
        return _fail(msg) if rank0 else EXIT_BAD_INPUT
    if rank0:
        for w in case.warnings:
            print(f"shearmix: warning: {w}", file=sys.stderr)
    from shearmix.solver.compute.options import ComputeOptionError
    from shearmix.solver.run.simulation import Simulation
    try:
        sim = Simulation(case, comm, initial=chosen is None)
    except (InitialStateError, GridError, CaseError, ComputeOptionError) as exc:
        return _fail(str(exc)) if rank0 else EXIT_BAD_INPUT
    if chosen is not None:
        chosen, warnings = _restore(sim, args.restart, case, out_dir, chosen, comm)
        if chosen is None:
            return _fail(warnings) if rank0 else EXIT_BAD_INPUT
        path, checked, skipped, notes = chosen
        if rank0:
            for why in skipped:
                print(f"shearmix: warning: passed over {why}", file=sys.stderr)
            for note in notes + warnings:
                print(f"shearmix: warning: {note}", file=sys.stderr)
            changed = ", ".join(f"{k} {_shown(a)} -> {_shown(b)}"
                                for k, (a, b) in checked["changes"].items())
            print(f"shearmix: restarting from {path} at step {sim.step_count}, t = {sim.t:.10g}"
                  + (f"; changed: {changed}" if changed else ""), flush=True)
        comm.barrier()
    return sim.run(output=out_dir, append=chosen is not None)


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
    p.add_argument("--no-memory-check", action="store_true",
                   help="start even when the expected memory exceeds what a node has "
                        "available (otherwise refused with exit 2)")
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
    p.add_argument("--ranks-per-node", type=int, metavar="N",
                   help="ranks sharing one node's memory (default: all of them)")
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


#: exit code when the reader of our output went away (``| head``): 128 + SIGPIPE, as a
#: shell reports a program that signal ended (common practice, no source)
EXIT_PIPE_CLOSED = 141


def main(argv=None) -> int:
    from shearmix.solver.compute.parallel import ending_every_rank
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        with ending_every_rank():  # on several ranks a closed pipe ends them all there
            code = int(args.func(args) or 0)
            sys.stdout.flush()  # a closed pipe shows here, not at interpreter exit
        return code
    except BrokenPipeError:
        # stop quietly; point stdout at /dev/null so the exit-time flush cannot fail again
        # (the recipe of the Python documentation, signal module, "Note on SIGPIPE")
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_PIPE_CLOSED


if __name__ == "__main__":
    sys.exit(main())
