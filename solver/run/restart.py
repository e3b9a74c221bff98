"""Continuing a run from a checkpoint, possibly with a changed case.

What may change between the checkpoint's case and the new one:

* parameters (``Re``, ``B``, ``Pe``/``Pr``, ``BPe``), forcing (``kf``,
  amplitude), stop conditions, time-step settings, outputs and compute
  settings, the name: taken as given;
* the tracers: one new in the case starts from its initial state, one missing
  from the case is dropped (both recorded in the restart event)
* the model: boussinesq -> lowpe drops ``T``; lowpe -> boussinesq sets ``T``
  from the quasi-static balance of docs/equations.md#models,
  ``T = Pe lap^{-1} w``, i.e. ``T_k = Pe alpha p_k / |k|^2`` with
  ``w_k = -alpha p_k`` (:mod:`shearmix.solver.physics.basis`) and ``T_0 = 0``;
* the grid (``grid.Nx/Ny/Nz``): spectral truncation or zero padding, every
  mode that both grids keep after dealiasing copied exactly
  (:func:`shearmix.solver.files.checkpoint.read_fields`);
* the rank count: any count the new grid allows.

The box (``box.Lx/Ly/Lz``) cannot change: the state's wavenumbers belong to
it. The ``initial`` section is ignored. Every change is recorded, with the
time, step, source file, rank counts and program versions, as a ``restart``
event in the run's history, which every later file carries.

The adaptive time step continues from the checkpoint's ``dt``; a changed
``time.dt`` replaces it.
"""
from __future__ import annotations

import math
import os

import numpy as np
import yaml

from shearmix.solver.case import Case
from shearmix.solver.files.checkpoint import (
    FOLDER,
    CheckpointError,
    latest,
    list_checkpoints,
    read_checkpoint_header,
    read_fields,
    set_aside,
)
from shearmix.solver.files.fileheader import history_of, now
from shearmix.solver.files.series import drop_segments_from, flat_keys
from shearmix.solver.files.slabfile import agree
from shearmix.solver.physics.terms import quasi_static
from shearmix.solver.physics.initial import apply_tracer_initial
from shearmix.solver.version import __version__


class RestartError(ValueError):
    """A restart that cannot be done; the message is one line naming the file or key."""


def resolve(spec: str, run_dir: str) -> tuple:
    """The checkpoint file ``spec`` names: a path, a folder of checkpoints, or ``latest``
    (the newest complete checkpoint of ``run_dir``). Returns ``(path, skipped)``,
    ``skipped`` the one-line reasons newer files were passed over. With ``latest``
    those files, the run's own, are set aside as ``*.damaged``
    (:func:`shearmix.solver.files.checkpoint.set_aside`). Call on one rank."""
    skipped: list = []
    if spec == "latest":
        folder = os.path.join(run_dir, FOLDER)
        path = latest(folder, skipped)
        if path is None:
            why = f" ({skipped[0]})" if skipped else ""
            raise RestartError(f"{folder}: no complete checkpoint to restart from{why}")
        step = int(read_checkpoint_header(path)["step"])
        newer = [p for s, p in reversed(list_checkpoints(folder)) if s > step]
        for i, bad in enumerate(newer[:len(skipped)]):
            try:
                skipped[i] += f"; set aside as {set_aside(bad, 'damaged')}"
            except OSError:
                pass  # still passed over, as before
        return path, skipped
    if os.path.isdir(spec):
        sub = os.path.join(spec, FOLDER)
        folder = sub if os.path.isdir(sub) else spec
        path = latest(folder, skipped)
        if path is None:
            raise RestartError(f"{folder}: no complete checkpoint to restart from")
        return path, skipped
    return spec, skipped


def changes(header: dict, case: Case, path: str) -> dict:
    """``{key: [old, new]}`` for every case key that differs; :class:`RestartError` for
    keys that cannot change."""
    try:
        old_raw = yaml.safe_load(header["case"]) or {}
    except yaml.YAMLError:
        raise RestartError(f"{path}: damaged checkpoint: its case text is not YAML") from None
    old = flat_keys(old_raw)
    new = flat_keys(case.raw)
    for axis, L_new in zip("xyz", case.lengths):
        L_old = header["lengths"]["xyz".index(axis)]
        if not math.isclose(L_old, L_new, rel_tol=1e-12, abs_tol=0.0):
            raise RestartError(f"box.L{axis}: cannot change at restart (checkpoint {path} has "
                               f"{L_old:.10g}, the case {L_new:.10g}); the state belongs to "
                               "its box: start a new run instead")
    diff = {}
    for key in sorted(set(old) | set(new)):
        if key.startswith("initial.") or key.startswith("box."):
            continue
        a, b = old.get(key), new.get(key)
        if a != b:
            diff[key] = [a, b]
    return diff


def check(path: str, case: Case, comm) -> dict:
    """Read and check the checkpoint's header against ``case`` (collective; rank 0 reads).

    Returns ``{'header': ..., 'changes': ...}``; raises :class:`RestartError`
    (on every rank) before anything is built or written.
    """
    result, error = None, None
    if comm.rank == 0:
        try:
            header = read_checkpoint_header(path)
            diff = changes(header, case, path)
            t_end = case.get("time.t_end")
            if t_end is not None and header["t"] >= t_end - 1e-12 * max(1.0, t_end):
                raise RestartError(f"time.t_end: the checkpoint {path} is at t = "
                                   f"{header['t']:.10g}, not before time.t_end = {t_end:g}; "
                                   "raise time.t_end to continue")
            result = {"header": header, "changes": diff}
        except (CheckpointError, RestartError) as exc:
            error = str(exc)
    error = agree(comm, error)
    if error:
        raise RestartError(error)
    return comm.bcast(result)


def apply(sim, path: str, checked: dict) -> None:
    """Load the checkpoint into ``sim`` (built for the new case, collective) and record
    the restart in ``sim.history``. Raises :class:`RestartError` on every rank if a
    column fails its checksum; ``sim`` is then unusable but nothing is written."""
    header, diff = checked["header"], checked["changes"]
    stored = header["fields"]
    wanted = [f for f in sim.fields if f in stored]
    error, data = None, None
    try:
        data = read_fields(path, header, sim.grid, wanted)
    except CheckpointError as exc:
        error = str(exc)
    error = agree(sim.comm, error)
    if error:
        raise RestartError(error)
    for i, name in enumerate(sim.fields):
        if name in data:
            sim.state[i] = data[name]
            # the engine keeps the state zero outside the dealiased band (its
            # kernels skip those modes); a resolution change or a file from
            # elsewhere may carry some there
            sim.state[i] *= sim.grid.dealias
        elif name == "T":
            sim.state[i] = quasi_static(sim.state[sim.fields.index("p")], sim.case.Pe,
                                        sim.basis, sim.grid)  # T = Pe lap^-1 w
            sim.state[i] *= sim.grid.dealias
    added = []
    for tracer in sim.case.tracers:
        if tracer.field not in data:  # a tracer new at this restart starts from its initial state
            apply_tracer_initial(sim, tracer)
            added.append(tracer.name)
    removed = [f[2:] for f in stored if f.startswith("c.") and f not in sim.fields]
    sim.t = float(header["t"])
    sim.step_count = int(header["step"])
    if "time.dt" in diff:
        sim.dt = float(sim.case.get("time.dt"))
    else:
        sim.dt = float(header["dt"])
    sim.history = list(header["history"]) + [{
        "event": "restart", "t": sim.t, "step": sim.step_count,
        "from": os.path.abspath(path), "ranks_before": int(header.get("ranks", 0)),
        "ranks": int(sim.comm.size), "version_before": header.get("version"),
        "version": __version__, "date": now(), "changes": diff,
        "tracers_added": added, "tracers_removed": removed}]
    history_of(sim)


def truncate_series(path: str, step: int) -> int:
    """Drop the records of ``step`` and later from a time-series file; return how many.

    A run killed after its last checkpoint leaves records the restarted run
    will write again; removing them keeps ``t`` and ``step`` increasing. The
    segments that began there go with them (the restart's case decides anew). Call
    on rank 0 only, after the checkpoint has been read successfully.
    """
    import h5py
    if not os.path.exists(path):
        return 0
    with h5py.File(path, "r+") as fh:
        if "step" not in fh:
            return 0
        steps = fh["step"][()]
        later = np.flatnonzero(steps >= step)
        keep = int(later[0]) if later.size else len(steps)
        dropped = len(steps) - keep
        if dropped:
            for name, ds in fh.items():
                if isinstance(ds, h5py.Dataset) and ds.maxshape and ds.maxshape[0] is None \
                        and ds.shape[0] == len(steps):
                    ds.resize((keep,) + ds.shape[1:])
        drop_segments_from(fh.attrs, step)
    return dropped
