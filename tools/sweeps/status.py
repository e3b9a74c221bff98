"""State of each member of a sweep, from the files in its run folder.

Sources, in ``runs/<member>/``:

* ``launch.json``, written by the sweep launcher (:mod:`shearmix.tools.sweeps.launch`)
  when it starts a run and again when the run exits: the command, the host
  and process id, and the exit code;
* ``timeseries.h5``: the last recorded step and simulated time;
* the checkpoints (their times), when the engine writes them;
* ``run.log``: the run's output, for the reason of a failure.

States (:data:`STATES`): ``not started`` (no launch record, no results),
``running`` (launched, no exit code yet, process alive or on another host),
``stopped early`` (exit code 4: wall-clock budget reached; resume it),
``finished`` (exit code 0), ``failed`` (any other exit code, or a launched
process that vanished without one; the reason is the run's last
``shearmix:`` message). A folder with results but no launch record (a run
started by hand) is ``finished`` when its series reaches ``time.t_end``,
otherwise ``unknown``.
"""
from __future__ import annotations

import json
import os
import socket

import h5py

from shearmix.solver.files.series import SERIES_FILE

__all__ = ["STATES", "LAUNCH_RECORD", "RUN_LOG", "read_record", "write_record", "latest_checkpoint",
           "member_status", "sweep_status", "format_table", "EXIT_REASONS"]

STATES = ("not started", "running", "stopped early", "finished", "failed", "unknown")
LAUNCH_RECORD = "launch.json"
RUN_LOG = "run.log"

#: exit codes of 'shearmix run' (solver/run/simulation.py, tools/cli.py)
EXIT_REASONS = {1: "unexpected error", 2: "bad input", 3: "blow-up", 4: "stopped early",
                5: "a checkpoint or snapshot could not be written"}


def read_record(run_dir):
    """The launch record of a run folder, or None."""
    path = os.path.join(run_dir, LAUNCH_RECORD)
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except (OSError, ValueError):
        return None


def write_record(run_dir, record):
    """Write the launch record atomically (a reader never sees half a file)."""
    path = os.path.join(run_dir, LAUNCH_RECORD)
    tmp = path + ".tmp"
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(record, fh, indent=1)
    os.replace(tmp, path)


def _series_tail(run_dir):
    path = os.path.join(run_dir, SERIES_FILE)
    if not os.path.exists(path):
        return None, None
    try:
        # no file locking: the running engine holds the file open for writing
        with h5py.File(path, "r", locking=False) as fh:
            n = fh["t"].shape[0]
            if n == 0:
                return None, None
            return int(fh["step"][n - 1]), float(fh["t"][n - 1])
    except (OSError, KeyError):
        return None, None  # being written, or not a series file


def latest_checkpoint(run_dir):
    """Path and simulated time of the newest complete checkpoint of a run, or ``(None, None)``.

    Checkpoints are ``<run>/checkpoints/chk_<step>.h5`` (solver/files/checkpoint.py);
    the engine's own lookup picks the newest file whose header is complete.
    """
    folder = os.path.join(run_dir, "checkpoints")
    if not os.path.isdir(folder):
        return None, None
    try:
        from shearmix.solver.files.checkpoint import latest
    except ImportError:  # an engine without checkpoints
        return None, None
    path = latest(folder)
    if path is None:
        return None, None
    t = None
    try:
        with h5py.File(path, "r", locking=False) as fh:
            t = float(fh.attrs["t"])
    except (OSError, KeyError, TypeError, ValueError):
        pass
    return path, t


def _last_message(run_dir):
    path = os.path.join(run_dir, RUN_LOG)
    try:
        with open(path, encoding="utf-8", errors="replace") as fh:
            lines = fh.read().splitlines()
    except OSError:
        return ""
    for line in reversed(lines):
        if line.startswith("shearmix:") and ("error" in line or "blow-up" in line):
            return line[len("shearmix:"):].strip()
    for line in reversed(lines):  # a traceback ends with the exception line
        if line.strip():
            return line.strip()[:200]
    return ""


def _code_from_log(run_dir):
    """Exit code implied by the last attempt's closing line in ``run.log``, or None.

    The engine ends a run with ``shearmix: finished at step ...`` (code 0) or
    ``shearmix: stopped at step ...`` (code 4, wall-clock budget).
    """
    try:
        with open(os.path.join(run_dir, RUN_LOG), encoding="utf-8", errors="replace") as fh:
            lines = fh.read().splitlines()
    except OSError:
        return None
    for line in reversed(lines):
        if line.startswith("# "):  # header of the last attempt: nothing after it
            return None
        if line.startswith("shearmix: finished at step"):
            return 0
        if line.startswith("shearmix: stopped at step"):
            return 4
    return None


def _alive(pid):
    try:
        os.kill(int(pid), 0)
    except (ProcessLookupError, ValueError, TypeError):
        return False
    except PermissionError:
        return True  # exists, owned by someone else
    return True


def member_status(run_dir, t_end=None):
    """Status of one run folder.

    Returns
    -------
    dict
        ``state`` (one of :data:`STATES`), ``step``, ``t`` (last record),
        ``checkpoint`` (path or None), ``checkpoint_t``, ``reason``.
    """
    step, t = _series_tail(run_dir)
    ckpt, ckpt_t = latest_checkpoint(run_dir)
    rec = read_record(run_dir)
    out = {"state": "not started", "step": step, "t": t, "checkpoint": ckpt,
           "checkpoint_t": ckpt_t, "reason": ""}
    if rec is None:
        if t is not None:
            done = t_end is not None and t >= t_end - 1e-9 * max(1.0, t_end)
            out["state"] = "finished" if done else "unknown"
            out["reason"] = "" if done else "results without a launch record (run by hand?)"
        return out
    code = rec.get("exit_code")
    if code is None:
        # the launcher died before it could record the end (killed, job time limit):
        # the run's own closing line, if it wrote one, tells how it ended
        code = _code_from_log(run_dir)
        if code is None and rec.get("host") == socket.gethostname() and not _alive(rec.get("pid")):
            out["state"] = "failed"
            out["reason"] = "the run's process ended without an exit code (killed?)"
            msg = _last_message(run_dir)
            if msg:
                out["reason"] += f"; last message: {msg}"
            return out
        if code is None:
            out["state"] = "running"
            out["reason"] = f"on {rec.get('host')}, pid {rec.get('pid')}"
            return out
    if code == 0:
        out["state"] = "finished"
    elif code == 4:
        out["state"] = "stopped early"
        out["reason"] = "wall-clock budget reached; resume with 'shearmix sweep run'"
    else:
        out["state"] = "failed"
        what = EXIT_REASONS.get(code, f"exit code {code}")
        if code < 0:
            what = f"killed by signal {-code}"
        msg = _last_message(run_dir)
        out["reason"] = f"{what}: {msg}" if msg else what
    return out


def _run_t_end(run_dir):
    """``time.t_end`` of the case the run actually used (its ``case.yaml``, overrides
    included: a chained member's end counts from the state it started from)."""
    import yaml
    try:
        with open(os.path.join(run_dir, "case.yaml"), encoding="utf-8") as fh:
            case = yaml.safe_load(fh)
        return case["time"]["t_end"]
    except (OSError, KeyError, TypeError, yaml.YAMLError):
        return None


def sweep_status(sweep):
    """Status rows of every member of a loaded sweep, in member order."""
    rows = []
    for m in sweep.members:
        t_end = _run_t_end(sweep.run_dir(m))
        if t_end is None:
            t_end = m.raw.get("time", {}).get("t_end") if isinstance(m.raw.get("time"), dict) else None
        st = member_status(sweep.run_dir(m), None if t_end is None else float(t_end))
        st["member"] = m.name
        st["t_end"] = t_end
        rows.append(st)
    return rows


def format_table(rows):
    """Plain-text table of status rows."""
    head = ("member", "state", "step", "t", "last checkpoint", "note")
    body = []
    for r in rows:
        ck = "-"
        if r["checkpoint"]:
            ck = os.path.basename(r["checkpoint"])
            if r["checkpoint_t"] is not None:
                ck += f" (t={r['checkpoint_t']:.4g})"
        t = "-" if r["t"] is None else f"{r['t']:.4g}"
        if r["t"] is not None and r.get("t_end"):
            t += f"/{float(r['t_end']):g}"
        body.append((r["member"], r["state"], "-" if r["step"] is None else str(r["step"]), t, ck,
                     r["reason"]))
    widths = [max(len(x[i]) for x in [head] + body) for i in range(len(head) - 1)]
    lines = []
    for row in [head] + body:
        lines.append("  ".join(c.ljust(w) for c, w in zip(row, widths)) + "  " + row[-1])
    return "\n".join(line.rstrip() for line in lines)
