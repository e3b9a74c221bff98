"""Local launch of a sweep's members: one after another or several at once.

Each member runs as its own process, ``shearmix run cases/<m>.yaml --output
runs/<m>``, under ``mpiexec -n RANKS`` when ``RANKS > 1`` (the ``mpiexec``
beside the Python interpreter, else the one on ``PATH``); ``launcher`` replaces
that prefix (e.g. ``"srun -n {ranks}"`` inside a batch job). Up to
``parallel`` members run at the same time, so a run of the sweep uses
``parallel * ranks`` cores. Output goes to ``runs/<m>/run.log`` and the
launch record ``runs/<m>/launch.json`` (see :mod:`shearmix.tools.sweeps.status`).

What happens to each member depends on its state:

* ``not started``: a fresh run; a chained member waits for its predecessor
  and starts from its newest checkpoint (``shearmix run CASE --restart
  <checkpoint>``, the member's ``time.t_end`` counted from that state), or
  from its own initial state when there is none (said in the log);
* ``stopped early``: resumed from its latest checkpoint
  (``shearmix run CASE --restart latest``);
* ``finished``, ``running``: left alone;
* ``failed``: left alone unless ``retry``, then resumed from its latest
  checkpoint if it has one, otherwise run again from the start (its old
  results are replaced).
"""
from __future__ import annotations

import os
import re
import shlex
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time

from shearmix.tools.sweeps.status import (
    RUN_LOG,
    latest_checkpoint,
    member_status,
    read_record,
    write_record,
)

__all__ = ["shearmix_command", "mpi_prefix", "plan_member", "run_members", "chain_source",
           "progress_line", "REPORT_SECONDS"]

#: seconds between progress lines while members run (one also at every start and end)
REPORT_SECONDS = 60.0
_LEFT = re.compile(r"left (\d+):(\d\d):(\d\d)\s*$")


def shearmix_command():
    """How to call the program: the ``shearmix`` script beside the interpreter, or ``-m``."""
    here = os.path.join(os.path.dirname(sys.executable), "shearmix")
    if os.path.exists(here):
        return [here]
    return [sys.executable, "-m", "shearmix.tools.cli"]


def mpi_prefix(ranks, launcher=None):
    """Command prefix that starts ``ranks`` ranks (empty for one rank without a launcher)."""
    if launcher:
        return shlex.split(launcher.format(ranks=ranks))
    if ranks == 1:
        return []
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    mpiexec = here if os.path.exists(here) else shutil.which("mpiexec")
    if mpiexec is None:
        raise RuntimeError("no mpiexec found beside the Python interpreter or on PATH; "
                           "run with --ranks 1 or give --launcher")
    return [mpiexec, "-n", str(ranks)]


def chain_source(sweep, member):
    """``(checkpoint path, its time)`` a chained member starts from, or ``(None, None)``.

    The predecessor's newest complete checkpoint (a run always ends with one).
    """
    if member.chain_from is None:
        return None, None
    prev = sweep.member(member.chain_from)
    return latest_checkpoint(sweep.run_dir(prev))


def _engine_can_restart():
    try:
        import shearmix.solver.run.restart  # noqa: F401  (issue 3: checkpoints and --restart)
    except ImportError:
        return False
    return True


def plan_member(sweep, member, retry=False):
    """What to do with a member: ``('skip', why)``, ``('fresh', None)`` or ``('resume', ckpt)``."""
    t_end = (member.raw.get("time") or {}).get("t_end")
    st = member_status(sweep.run_dir(member), None if t_end is None else float(t_end))
    state = st["state"]
    if state in ("finished", "running"):
        return "skip", state
    if state == "stopped early":
        if st["checkpoint"] is None:
            return "skip", "stopped early without a checkpoint: nothing to resume from"
        return "resume", st["checkpoint"]
    if state in ("failed", "unknown"):
        if not retry:
            return "skip", f"{state} ({st['reason']}); use --retry to run it again"
        return ("resume", st["checkpoint"]) if st["checkpoint"] else ("fresh", "retry")
    return "fresh", None


def _command(sweep, member, action, ranks, launcher, sets, log):
    cmd = mpi_prefix(ranks, launcher) + shearmix_command() + [
        "run", sweep.case_path(member), "--output", sweep.run_dir(member)]
    if action[0] == "resume":
        cmd += ["--restart", "latest"]
    elif action[1] == "retry":
        cmd += ["--set", "output.overwrite=true"]
    elif member.chain_from is not None:
        src, t_src = chain_source(sweep, member)
        if src and t_src is not None and _engine_can_restart():
            # continue the neighbour's state with this member's parameters; the
            # member's time.t_end counts from the state it starts from
            t_end = float(member.raw["time"]["t_end"])
            cmd += ["--restart", src, "--set", f"time.t_end={t_src + t_end!r}"]
            log(f"sweep: {member.name}: starts from {member.chain_from}'s state at t = {t_src:.6g}")
        else:
            why = "its predecessor has no checkpoint" if not src else \
                "this engine cannot restart from a checkpoint"
            log(f"sweep: {member.name}: chaining skipped ({why}); it starts from its own "
                "initial state")
    for s in sets or ():
        cmd += ["--set", s]
    return cmd


def _start(sweep, member, cmd, env):
    run_dir = sweep.run_dir(member)
    os.makedirs(run_dir, exist_ok=True)
    logf = open(os.path.join(run_dir, RUN_LOG), "a", encoding="utf-8")
    logf.write(f"\n# {time.strftime('%Y-%m-%dT%H:%M:%S%z')} {shlex.join(cmd)}\n")
    logf.flush()
    # own process group: an interrupt of the launcher reaches the run only through us
    proc = subprocess.Popen(cmd, stdout=logf, stderr=subprocess.STDOUT, env=env,
                            start_new_session=True)
    write_record(run_dir, {"member": member.name, "command": cmd, "host": socket.gethostname(),
                           "pid": proc.pid, "launcher_pid": os.getpid(),
                           "started": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
                           "exit_code": None})
    return proc, logf


def _finish(sweep, member, proc, logf, code):
    logf.close()
    run_dir = sweep.run_dir(member)
    rec = read_record(run_dir) or {}
    rec.update(exit_code=code, ended=time.strftime("%Y-%m-%dT%H:%M:%S%z"))
    write_record(run_dir, rec)


def _clock(seconds):
    seconds = max(0, int(round(seconds)))
    h, m, s = seconds // 3600, seconds % 3600 // 60, seconds % 60
    return f"{h}h{m:02d}m{s:02d}s" if h else f"{m}m{s:02d}s"


def progress_line(total, done, failed, running, elapsed, durations, parallel):
    """One line of a sweep's progress.

    ``running``: ``(name, seconds running, seconds left or None)`` per running
    member (``left`` from the engine's own progress line). Time left: each
    running member's own estimate (else the mean duration of the members
    finished so far less its time running) plus the mean duration for each
    member still waiting, shared over ``parallel`` slots; unknown until one of
    these exists.
    """
    waiting = total - done - len(running)
    known = list(durations) or [el + left for _, el, left in running if left is not None]
    per = sum(known) / len(known) if known else None
    work = 0.0
    for _, el, left in running:
        if left is not None:
            work += left
        elif per is not None:
            work += max(per - el, 0.0)
        else:
            work = None
            break
    if work is not None and per is None and waiting:
        work = None
    run = ", ".join(f"{name} ({_clock(el)})" for name, el, _ in running) or "none"
    left = "time left unknown yet" if work is None else \
        f"about {_clock((work + waiting * (per or 0.0)) / max(parallel, 1))} left"
    bad = f" ({failed} failed or stopped)" if failed else ""
    return (f"sweep: {done} of {total} done{bad}; running: {run}; {waiting} waiting; "
            f"elapsed {_clock(elapsed)}, {left}")


def _engine_left(sweep, member):
    """Seconds left by the newest progress line of a running member's log, or None."""
    try:
        with open(os.path.join(sweep.run_dir(member), RUN_LOG), "rb") as fh:
            fh.seek(0, os.SEEK_END)
            fh.seek(max(0, fh.tell() - 4096))
            lines = fh.read().decode("utf-8", "replace").splitlines()
    except OSError:
        return None
    for line in reversed(lines):
        m = _LEFT.search(line)
        if m:
            return 3600 * int(m.group(1)) + 60 * int(m.group(2)) + int(m.group(3))
    return None


def run_members(sweep, names=None, ranks=1, parallel=1, launcher=None, retry=False, sets=None,
                log=None, poll=0.2, env=None, report_seconds=REPORT_SECONDS):
    """Run (or resume) members, at most ``parallel`` at a time.

    Chained members run in chain order: a member starts only after its
    predecessor finished in this call or before it.

    Parameters
    ----------
    names : list of str, optional
        Members to consider (default: all).
    sets : list of str, optional
        Extra ``key=value`` overrides for every run (e.g. ``time.wall_hours=11.5``).

    Progress: a :func:`progress_line` at every start and end of a member and
    every ``report_seconds`` while members run.

    Returns
    -------
    dict
        Member name -> exit code of the runs started here (skipped members
        are absent).
    """
    log = log or (lambda msg: print(msg, flush=True))  # seen at once also in a batch log
    chosen = set(names) if names else {m.name for m in sweep.members}
    queues = [[m for m in chain if m.name in chosen] for chain in sweep.chains()]
    queues = [q for q in queues if q]
    env = dict(os.environ if env is None else env)
    env.setdefault("OMP_NUM_THREADS", "1")  # one core per rank; several runs share the machine
    active, codes = [], {}
    total = sum(len(q) for q in queues)
    done, failed, durations = 0, 0, []
    began = time.monotonic()
    started_at = {}
    last_report = began

    def report():
        nonlocal last_report
        now = time.monotonic()
        last_report = now
        running = [(m.name, now - started_at[m.name], _engine_left(sweep, m))
                   for _, _, m, _ in active]
        log(progress_line(total, done, failed, running, now - began, durations, parallel))

    # a batch system ends a job with SIGTERM: treat it as an interrupt, so the
    # runs are asked to stop (they checkpoint) and their exit codes recorded
    previous = signal.getsignal(signal.SIGTERM)
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _raise_interrupt)
    try:
        while queues or active:
            while len(active) < parallel:
                started = False
                for q in [q for q in queues if not any(a[3] is q for a in active)]:
                    member = q[0]
                    action = plan_member(sweep, member, retry)
                    if action[0] == "skip":
                        log(f"sweep: {member.name}: skipped ({action[1]})")
                        q.pop(0)
                        done += 1
                        if action[1] != "finished":  # a chain cannot go past it
                            done += _drop_rest(q, member, log)
                        if not q:
                            queues.remove(q)
                        started = True
                        break
                    cmd = _command(sweep, member, action, ranks, launcher, sets, log)
                    verb = "resuming" if action[0] == "resume" else "starting"
                    log(f"sweep: {member.name}: {verb} ({ranks} rank{'s' if ranks > 1 else ''})")
                    proc, logf = _start(sweep, member, cmd, env)
                    started_at[member.name] = time.monotonic()
                    active.append((proc, logf, member, q))
                    report()
                    started = True
                    break
                if not started:
                    break
            for item in list(active):
                proc, logf, member, q = item
                code = proc.poll()
                if code is None:
                    continue
                _finish(sweep, member, proc, logf, code)
                codes[member.name] = code
                active.remove(item)
                word = {0: "finished", 4: "stopped early (resume later)"}.get(code, f"failed (exit {code})")
                log(f"sweep: {member.name}: {word}")
                done += 1
                if code == 0:
                    durations.append(time.monotonic() - started_at[member.name])
                else:
                    failed += 1
                q.pop(0)
                if code != 0:
                    done += _drop_rest(q, member, log)
                if not q:
                    queues.remove(q)
                report()
            if active:
                if time.monotonic() - last_report >= report_seconds:
                    report()
                time.sleep(poll)
    except KeyboardInterrupt:
        log("sweep: interrupted; asking the running members to stop")
        for proc, logf, member, q in active:
            try:
                os.killpg(proc.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
        for proc, logf, member, q in active:
            try:
                code = proc.wait(timeout=120)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                code = proc.wait()
            _finish(sweep, member, proc, logf, code)
            codes[member.name] = code
        raise
    finally:
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGTERM, previous)
    return codes


def _raise_interrupt(signum, frame):
    raise KeyboardInterrupt


def _drop_rest(q, member, log):
    """Drop the members chained after ``member`` (which did not finish); how many were dropped."""
    if q and q[0].chain_from == member.name:
        log(f"sweep: {', '.join(m.name for m in q)}: not started (chained after {member.name}, "
            "which did not finish)")
        n = len(q)
        q.clear()
        return n
    return 0
