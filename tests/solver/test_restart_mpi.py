"""Restarts under MPI: bit for bit on 2 ranks, round-off agreement across rank counts.

The state written by P ranks is read back by Q ranks: the continuation of a
run that ran 8 steps on 2 ranks, continued on 1 (and the reverse), is
compared with the uninterrupted runs. Different rank counts take different
FFT paths (one 3D plan against slab transforms and a transpose), so those
agree to round-off, as in test_mpi.py (same 1e-12 bound, there over 50 steps).
"""
import os
import sys

import numpy as np
import pytest
from test_mpi import _mpiexec

sys.path.insert(0, os.path.dirname(__file__))
import checkpoint_probe as probe  # noqa: E402

from shearmix.solver.files.checkpoint import FOLDER, checkpoint_path  # noqa: E402

PROBE = os.path.join(os.path.dirname(__file__), "checkpoint_probe.py")

# no skip without mpiexec: scripts/setup installs one; deselect with -m "not mpi"
pytestmark = pytest.mark.mpi


def _probe(nranks, *args):
    import subprocess
    env = dict(os.environ, OMP_NUM_THREADS="1")
    env.pop("SHEARMIX_SERIAL", None)
    cmd = [_mpiexec(), "-n", str(nranks), sys.executable, PROBE, *map(str, args)]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=300, env=env)
    assert res.returncode == 0, res.stderr[-2000:]


def _load(path, nranks):
    r = np.load(path)
    assert int(r["size"]) == nranks and int(r["step"]) == probe.STEPS
    return r


def test_two_rank_restart_is_bit_for_bit(tmp_path):
    _probe(2, "straight", tmp_path / "s", tmp_path / "s.npz")
    _probe(2, "split", tmp_path / "p", tmp_path / "p.npz")
    s, p = _load(tmp_path / "s.npz", 2), _load(tmp_path / "p.npz", 2)
    assert np.abs(s["state"]).max() > 0.1
    assert np.array_equal(p["state"], s["state"])
    assert (float(p["t"]), float(p["dt"])) == (float(s["t"]), float(s["dt"]))


def test_written_on_two_read_on_one_and_the_reverse(tmp_path):
    # one rank, in this process: uninterrupted, and the step-8 checkpoint
    one = probe.run(probe.probe_case(probe.STEPS), str(tmp_path / "one"))
    probe.run(probe.probe_case(probe.FIRST), str(tmp_path / "one_first"))
    ckpt_1 = checkpoint_path(str(tmp_path / "one_first" / FOLDER), probe.FIRST)
    # two ranks: uninterrupted + split (leaves a step-8 checkpoint), and resumed from ckpt_1
    _probe(2, "split", tmp_path / "two", tmp_path / "two.npz")
    _probe(2, "resume", ckpt_1, tmp_path / "two_from_one", tmp_path / "two_from_one.npz")
    ckpt_2 = checkpoint_path(str(tmp_path / "two" / FOLDER), probe.FIRST)
    one_from_two = probe.run(probe.probe_case(probe.STEPS - probe.FIRST),
                             str(tmp_path / "one_from_two"), ckpt_2)
    two = _load(tmp_path / "two.npz", 2)
    two_from_one = _load(tmp_path / "two_from_one.npz", 2)
    scale = np.abs(one.state).max()
    assert scale > 0.1
    for state in (two_from_one["state"], one_from_two.state):
        assert np.abs(state - one.state).max() < 1e-12 * scale
        assert np.abs(state - two["state"]).max() < 1e-12 * scale
    assert float(two_from_one["t"]) == pytest.approx(one.t, rel=1e-12)
    assert one_from_two.t == pytest.approx(float(two["t"]), rel=1e-12)
