"""A failure on one rank ends every rank: 2 ranks under ``mpiexec``, with a timeout.

Without that rule a rank waits for ever in a collective call that the failed
rank never makes (common practice for MPI programs, no source: MPI_Abort is
the standard's way to end every rank of a communicator).
"""
import os
import subprocess
import sys

import pytest
from test_mpi import _mpiexec

# no skip without mpiexec: scripts/setup installs one; deselect with -m "not mpi"
pytestmark = pytest.mark.mpi

CASE = """
name: tiny
model: lowpe
parameters: {Re: 50, BPe: 1}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 4}
compute: {fftw_effort: estimate, wisdom: ''}
"""

# a fault in one rank only, while the ranks build the simulation
RANK1_FAILS = """
import shearmix.solver.run.simulation as s
from mpi4py import MPI
_init = s.Simulation.__init__
def _failing(self, *a, **k):
    if MPI.COMM_WORLD.Get_rank() == 1:
        raise RuntimeError("injected fault on rank 1")
    _init(self, *a, **k)
s.Simulation.__init__ = _failing
"""

TIMEOUT = 150  # 2 ranks start in a few seconds; a hang is what this catches


def _cli(tmp_path, *args, pre=""):
    code = f"{pre}\nimport sys\nfrom shearmix.tools.cli import main\nsys.exit(main(sys.argv[1:]))"
    env = dict(os.environ, OMP_NUM_THREADS="1")
    env.pop("SHEARMIX_SERIAL", None)
    cmd = [_mpiexec(), "-n", "2", sys.executable, "-c", code, *args]
    try:
        return subprocess.run(cmd, cwd=tmp_path, env=env, capture_output=True, text=True,
                              timeout=TIMEOUT)
    except subprocess.TimeoutExpired:
        pytest.fail(f"2 ranks still running after {TIMEOUT} s: {' '.join(args)}")


def test_run_folder_under_a_file_ends_both_ranks_with_one_line(tmp_path):
    (tmp_path / "case.yaml").write_text(CASE)
    (tmp_path / "f").write_text("x")
    r = _cli(tmp_path, "run", "case.yaml", "-o", "f/run")
    assert r.returncode == 2, r.stderr[-2000:]
    assert "Traceback" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and "f/run: the run folder cannot be made" in lines[0], r.stderr


def test_an_exception_in_one_rank_ends_every_rank(tmp_path):
    (tmp_path / "case.yaml").write_text(CASE)
    r = _cli(tmp_path, "run", "case.yaml", "-o", "out", pre=RANK1_FAILS)
    assert r.returncode == 1, r.stderr[-2000:]  # MPI_Abort(1): docs/running.md
    assert "injected fault on rank 1" in r.stderr
