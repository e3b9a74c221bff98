"""The rules of a run folder: starting one, continuing one at a restart, cutting it back.

A folder *holds a run* when it has a time series (``timeseries.h5``) or a
checkpoint. The rules, the same for ``shearmix run`` and for
``Simulation(case).run()`` from Python:

* a new run refuses a folder that holds a run, unless ``output.overwrite``
  is true (its checkpoints are then removed first, so that ``latest`` can
  never pick one of them);
* a restart continues a folder from one of its own checkpoints, or seeds an
  empty folder from another run's checkpoint; a checkpoint of another run
  never continues a folder that holds a run;
* continuing from a checkpoint that is not the folder's newest cuts the
  folder back to it: newer checkpoints that fail their checks are set aside
  as ``*.damaged``; newer good ones are a run's results, so they are set
  aside (as ``*.superseded``, never deleted) only with ``output.overwrite``;
  the time-series records from the checkpoint's step on are dropped.

Every refusal is a :class:`RunFolderError` (one line naming the folder or
file) raised before anything is built or written. Collective functions take
the communicator; rank 0 looks at the folder and every rank gets the same
answer.
"""
from __future__ import annotations

import os

from shearmix.solver.files.checkpoint import (
    FOLDER,
    CheckpointError,
    list_checkpoints,
    set_aside,
    verify,
)
from shearmix.solver.files.fileheader import history_of
from shearmix.solver.files.series import SERIES_FILE
from shearmix.solver.files.slabfile import agree
from shearmix.solver.run.restart import truncate_series
from shearmix.solver.version import __version__

CASE_FILE = "case.yaml"


class RunFolderError(ValueError):
    """A run folder that cannot be used as asked (one-line message)."""


def holds_run(out_dir: str) -> str | None:
    """What marks ``out_dir`` as holding a run (``timeseries.h5`` or ``checkpoints``), or None."""
    if os.path.exists(os.path.join(out_dir, SERIES_FILE)):
        return SERIES_FILE
    if list_checkpoints(os.path.join(out_dir, FOLDER)):
        return "checkpoints"
    return None


def creatable(out_dir: str) -> None:
    """Raise :class:`RunFolderError` unless ``out_dir`` is, or can be made as, a writable folder.

    Looks only: nothing is created.
    """
    path = os.path.abspath(out_dir)
    if os.path.exists(path) and not os.path.isdir(path):
        raise RunFolderError(f"{out_dir}: the run folder is a file, not a folder")
    probe = path
    while not os.path.exists(probe):
        probe = os.path.dirname(probe)
    if not os.path.isdir(probe):
        raise RunFolderError(f"{out_dir}: the run folder cannot be made: {probe} is a file, "
                             "not a folder")
    if not os.access(probe, os.W_OK | os.X_OK):
        raise RunFolderError(f"{out_dir}: the run folder cannot be "
                             f"{'written' if probe == path else 'made'}: no permission to "
                             f"write in {probe}")


def _own_folder(out_dir: str) -> str:
    return os.path.realpath(os.path.join(out_dir, FOLDER))


def _newer(out_dir: str, step: int, source: str) -> list:
    """Checkpoint paths of the folder after ``step`` (other than ``source``)."""
    own = _own_folder(out_dir)
    return [p for s, p in list_checkpoints(own)
            if s > step and os.path.realpath(p) != os.path.realpath(source)]


def check_new(case, out_dir: str) -> None:
    """The rules for a new run in ``out_dir`` (not collective); :class:`RunFolderError`."""
    creatable(out_dir)
    held = holds_run(out_dir)
    if held and not case.get("output.overwrite"):
        raise RunFolderError(f"{out_dir}: already holds a run ({held}); continue it with "
                             "--restart latest, choose another --output or set "
                             "output.overwrite=true to replace it")


def check_restart(case, out_dir: str, source: str, step: int) -> list:
    """The rules for continuing ``out_dir`` from the checkpoint ``source`` at ``step``.

    Not collective (call on rank 0). Newer checkpoints of the folder are
    verified; those that fail are set aside as ``*.damaged`` here. Returns
    the one-line notes of what was set aside; raises :class:`RunFolderError`.
    """
    creatable(out_dir)
    notes = []
    own = _own_folder(out_dir)
    if os.path.realpath(os.path.dirname(os.path.abspath(source))) != own:
        held = holds_run(out_dir)
        if held:
            raise RunFolderError(f"{out_dir}: already holds a run and {source} is not one of "
                                 "its checkpoints; continue it in a new --output folder")
        return notes
    good = []
    for path in _newer(out_dir, step, source):
        try:
            verify(path)
            good.append(path)
        except CheckpointError as exc:
            notes.append(f"{set_aside(path, 'damaged')}: set aside ({exc})")
    if good and not case.get("output.overwrite"):
        raise RunFolderError(
            f"{source}: older than the newest checkpoint {good[-1]} of this run; restarting "
            f"from it discards {len(good)} newer checkpoint(s): set output.overwrite=true to "
            "do so (they are set aside as *.superseded), continue from it in a new --output "
            "folder, or restart from the newest")
    return notes


def cut_back(out_dir: str, source: str | None, step: int) -> list:
    """Make the folder continue at ``step``: set newer checkpoints aside (as
    ``*.superseded``; the checks passed already) and drop the time-series records
    from ``step`` on. Rank 0 only; returns one-line notes of what was done."""
    notes = []
    if source is not None and os.path.realpath(os.path.dirname(os.path.abspath(source))) \
            == _own_folder(out_dir):
        for path in _newer(out_dir, step, source):
            notes.append(f"{set_aside(path, 'superseded')}: set aside, written after the "
                         "checkpoint this run continues from")
    series = os.path.join(out_dir, SERIES_FILE)
    dropped = truncate_series(series, step)
    if dropped:
        notes.append(f"{series}: dropped {dropped} record(s) from step {step} on, written "
                     "after that checkpoint")
    return notes


def _restart_source(sim) -> str | None:
    history = getattr(sim, "history", None) or []
    last = history[-1] if history else {}
    return last.get("from") if last.get("event") == "restart" else None


def start(sim, out_dir: str, append: bool) -> list:
    """Open ``out_dir`` for ``sim``'s run (collective): check the rules, remove a replaced
    run's checkpoints or cut a continued folder back, make the folder and write
    ``case.yaml``. Returns the notes to print (rank 0; empty elsewhere); raises
    :class:`RunFolderError` on every rank, with the folder untouched."""
    comm = sim.comm
    notes, error = [], None
    if not append:
        history_of(sim)  # the run starts here, not where its first file is written
    if comm.rank == 0:
        try:
            if append:
                source = _restart_source(sim)
                if source is not None:
                    notes += check_restart(sim.case, out_dir, source, sim.step_count)
                notes += cut_back(out_dir, source, sim.step_count)
            else:
                check_new(sim.case, out_dir)
                for _, path in list_checkpoints(os.path.join(out_dir, FOLDER)):
                    os.remove(path)  # the replaced run's (output.overwrite)
            os.makedirs(out_dir, exist_ok=True)
            with open(os.path.join(out_dir, CASE_FILE), "w", encoding="utf-8") as fh:
                fh.write(f"# written by shearmix {__version__}\n")
                fh.write(sim.case.to_yaml())
        except RunFolderError as exc:
            error = str(exc)
        except OSError as exc:
            error = f"{exc.filename or out_dir}: the run folder cannot be written " \
                    f"({exc.strerror or exc})"
    error = agree(comm, error)
    if error:
        raise RunFolderError(error)
    return notes
