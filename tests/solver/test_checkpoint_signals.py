"""SIGTERM / SIGUSR1 during a run: a checkpoint at the next step boundary and exit code 4."""
import os
import re
import signal
import subprocess
import sys

import pytest

from shearmix.solver.files.checkpoint import list_checkpoints, verify

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

CASE = """
name: long
model: lowpe
parameters: {Re: 50, BPe: 1}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 1000000}
output: {diagnostics_every: 5, progress_every: 1}
compute: {fftw_effort: estimate, wisdom: ''}
"""


def _start(cmd, cwd, env):
    return subprocess.Popen(cmd, cwd=cwd, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def _stop_after_steps(proc, sig, steps=5, target=None):
    """Read progress lines until ``steps`` steps ran, then send ``sig``; wait for the end."""
    lines = []
    for line in proc.stdout:
        lines.append(line)
        m = re.match(r"step\s+(\d+)", line)
        if m and int(m.group(1)) >= steps:
            os.kill((target or proc).pid, sig)
            break
    out, err = proc.communicate(timeout=120)
    return proc.returncode, "".join(lines) + out, err


def test_sigterm_writes_checkpoint_and_exits_4(tmp_path):
    (tmp_path / "long.yaml").write_text(CASE)
    env = dict(os.environ, SHEARMIX_SERIAL="1")
    proc = _start([sys.executable, "-m", "shearmix.tools.cli", "run", "long.yaml", "-o", "out"],
                  tmp_path, env)
    code, out, err = _stop_after_steps(proc, signal.SIGTERM)
    assert code == 4, out + err
    m = re.search(r"SIGTERM received: writing a checkpoint and stopping at step (\d+)", out)
    assert m, out
    step = int(m.group(1))
    ((last, path),) = list_checkpoints(str(tmp_path / "out" / "checkpoints"))
    assert last == step and verify(path)["step"] == step
    assert f"stopped at step {step}" in out


@pytest.mark.mpi
def test_sigusr1_to_mpiexec_stops_both_ranks_with_a_checkpoint(tmp_path):
    from test_mpi import _mpiexec
    (tmp_path / "long.yaml").write_text(CASE)
    env = dict(os.environ, OMP_NUM_THREADS="1")
    env.pop("SHEARMIX_SERIAL", None)
    proc = _start([_mpiexec(), "-n", "2", sys.executable, "-m", "shearmix.tools.cli", "run", "long.yaml",
                   "-o", "out"], tmp_path, env)
    code, out, err = _stop_after_steps(proc, signal.SIGUSR1)
    assert code == 4, out + err
    m = re.search(r"SIGUSR1 received: writing a checkpoint and stopping at step (\d+)", out)
    assert m, out
    ((last, path),) = list_checkpoints(str(tmp_path / "out" / "checkpoints"))
    assert last == int(m.group(1)) and verify(path)["ranks"] == 2
