"""Batch job scripts for a sweep: SLURM or PBS, one job per member, resubmitting themselves.

The templates are ``scripts/batch/slurm.sh.in`` and ``scripts/batch/pbs.sh.in``
(placeholders ``@NAME@``, listed in :data:`PLACEHOLDERS`). Each job runs

    shearmix sweep run SWEEP.yaml --only MEMBER --ranks R --retry
        --launcher L --wall-hours H

with ``L`` the MPI the installation was built with (:func:`launcher`): the
``mpiexec`` of the environment's own MPI (``scripts/setup`` installs one), or,
when ``scripts/setup`` ran with ``SHEARMIX_SYSTEM_MPI=1`` (recorded in
``<environment>/shearmix-mpi``), the site's ``srun -n {ranks}`` (SLURM) or
``mpiexec -n {ranks}`` (PBS) from the job's PATH after the site's module loads,

and ``H`` the job's wall time minus a margin, so the engine writes a
checkpoint and exits with code 4 before the scheduler kills the job; the
script then submits itself again (``sbatch``/``qsub``), up to a maximum count
kept in ``runs/<member>/batch-resubmits``. The next job resumes the member
from its latest checkpoint (``shearmix run --restart latest``, chosen by the
sweep launcher from the member's state). Each job writes its own log,
``runs/<member>/batch-<job id>.out``. Scripts go to
``<sweep folder>/batch/<member>.<system>.sh``.
"""
from __future__ import annotations

import os
import re
import shlex
import subprocess
import sys

from shearmix.tools.sweeps.launch import shearmix_command

__all__ = ["BatchError", "SYSTEMS", "PLACEHOLDERS", "MPI_RECORD", "template_path",
           "installed_mpi", "launcher", "parse_walltime", "render", "write_batch_scripts",
           "submit"]

SYSTEMS = {
    "slurm": {"template": "slurm.sh.in", "submit": "sbatch", "launcher": "srun -n {ranks}",
              "account": "#SBATCH --account={}", "queue": "#SBATCH --partition={}"},
    "pbs": {"template": "pbs.sh.in", "submit": "qsub", "launcher": "mpiexec -n {ranks}",
            "account": "#PBS -A {}", "queue": "#PBS -q {}"},
}
PLACEHOLDERS = ("SWEEP_NAME", "MEMBER", "JOB_NAME", "RANKS", "WALLTIME", "RUN_DIR", "WORK_DIR",
                "EXTRA_DIRECTIVES", "RUN_COMMAND", "MAX_RESUBMITS", "SUBMIT", "SCRIPT",
                "BIN_DIR", "MPI")
#: written by scripts/setup into the environment: ``bundled`` or ``system``
MPI_RECORD = "shearmix-mpi"


class BatchError(ValueError):
    """Bad batch options or a missing template (one-line message)."""


def template_path(system):
    """Path of the template of ``system`` in the source tree's ``scripts/batch``."""
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    return os.path.join(root, "scripts", "batch", SYSTEMS[system]["template"])


def installed_mpi(prefix=None):
    """``'bundled'`` (the environment's own MPI) or ``'system'`` (the site's), as
    ``scripts/setup`` recorded it; without a record, ``'bundled'`` when an
    ``mpiexec`` sits beside the interpreter."""
    prefix = sys.prefix if prefix is None else prefix
    try:
        with open(os.path.join(prefix, MPI_RECORD), encoding="utf-8") as fh:
            choice = fh.read().strip()
    except OSError:
        choice = ""
    if choice in ("bundled", "system"):
        return choice
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    return "bundled" if os.path.exists(here) else "system"


def launcher(system, mpi=None):
    """The ``--launcher`` of a job: the environment's own ``mpiexec`` by its full path
    (``bundled``), or the site's launcher of ``system`` from PATH (``system``)."""
    mpi = installed_mpi() if mpi is None else mpi
    if mpi == "bundled":
        here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
        return f"{shlex.quote(here)} -n {{ranks}}"
    return SYSTEMS[system]["launcher"]


def parse_walltime(text):
    """Seconds of a wall time ``HH:MM:SS`` (hours may exceed 24)."""
    m = re.fullmatch(r"(\d+):([0-5]\d):([0-5]\d)", str(text).strip())
    if not m:
        raise BatchError(f"--walltime: must be HH:MM:SS, e.g. 12:00:00, got {text!r}")
    h, mi, s = map(int, m.groups())
    return 3600 * h + 60 * mi + s


def render(template, values):
    """Replace every ``@NAME@``; a placeholder left over is an error."""
    out = template
    for k, v in values.items():
        out = out.replace(f"@{k}@", str(v))
    left = re.findall(r"@[A-Z_]+@", out)
    if left:
        raise BatchError(f"template placeholder {left[0]} has no value")
    return out


def write_batch_scripts(sweep, system, walltime="12:00:00", ranks=1, margin_minutes=10.0,
                        max_resubmits=20, queue=None, account=None, only=None,
                        run_command=None, mpi=None):
    """Write one job script per member; return their paths.

    ``run_command`` replaces the command the job runs (tests use a stand-in);
    ``mpi`` (``bundled``/``system``) replaces the recorded choice of MPI.
    """
    if system not in SYSTEMS:
        raise BatchError(f"--system: must be one of {', '.join(SYSTEMS)}, got {system!r}")
    if ranks < 1:
        raise BatchError(f"--ranks: must be at least 1, got {ranks}")
    if max_resubmits < 0:
        raise BatchError(f"--max-resubmits: must be >= 0, got {max_resubmits}")
    seconds = parse_walltime(walltime)
    budget = seconds - 60.0 * margin_minutes
    if budget <= 0:
        raise BatchError(f"--margin-minutes {margin_minutes:g} leaves no time in a wall time of "
                         f"{walltime}")
    spec = SYSTEMS[system]
    tpath = template_path(system)
    try:
        with open(tpath, encoding="utf-8") as fh:
            template = fh.read()
    except OSError as exc:
        raise BatchError(f"{tpath}: cannot read the {system} template ({exc.strerror}); "
                         "'sweep batch' reads its templates from the source tree's "
                         "scripts/batch: install shearmix from its source folder "
                         "(scripts/setup)") from None
    members = [sweep.member(n) for n in only] if only else sweep.members
    out_dir = os.path.join(sweep.directory, "batch")
    os.makedirs(out_dir, exist_ok=True)
    mpi = installed_mpi() if mpi is None else mpi
    extra = "\n".join(spec[k].format(v) for k, v in (("account", account), ("queue", queue)) if v)
    paths = []
    from shearmix.tools.sweeps.spec import expand
    expand(sweep, log=lambda m: None)  # the jobs need the case files and run folders
    for m in members:
        script = os.path.join(out_dir, f"{m.name}.{system}.sh")
        cmd = run_command or shlex.join(shearmix_command() + [
            "sweep", "run", sweep.source, "--only", m.name, "--ranks", str(ranks), "--retry",
            "--launcher", launcher(system, mpi), "--wall-hours", f"{budget / 3600:.4f}"])
        text = render(template, {
            "SWEEP_NAME": sweep.name, "MEMBER": m.name, "JOB_NAME": f"{sweep.name}-{m.name}"[:64],
            "RANKS": ranks, "WALLTIME": walltime, "RUN_DIR": sweep.run_dir(m),
            "WORK_DIR": os.path.dirname(sweep.source), "EXTRA_DIRECTIVES": extra,
            "RUN_COMMAND": cmd, "MAX_RESUBMITS": int(max_resubmits), "SUBMIT": spec["submit"],
            "SCRIPT": script, "BIN_DIR": os.path.dirname(sys.executable),
            "MPI": "the site's (SHEARMIX_SYSTEM_MPI=1 at set-up)" if mpi == "system"
            else "the environment's own (installed by scripts/setup)"})
        with open(script, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.chmod(script, 0o755)
        paths.append(script)
    return paths


def submit(paths, system):
    """Submit job scripts with ``sbatch``/``qsub``; return 0, or 1 if one was refused."""
    tool = SYSTEMS[system]["submit"]
    code = 0
    for p in paths:
        try:
            r = subprocess.run([tool, p], capture_output=True, text=True)
        except FileNotFoundError:
            print(f"shearmix: error: {tool} not found: is this a {system} machine?", file=sys.stderr)
            return 1
        print((r.stdout or r.stderr).strip())
        code |= r.returncode != 0
    return int(code)
