"""Slab decomposition under MPI: transforms against numpy.fft, and results
independent of the rank count (1, 2, 4 and 8 ranks; more than 2 oversubscribe
2 cores)."""
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest

from shearmix.solver.grid import Grid

PROBE = os.path.join(os.path.dirname(__file__), "mpi_probe.py")


def _mpiexec():
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    return here if os.path.exists(here) else shutil.which("mpiexec")


pytestmark = [pytest.mark.mpi,
              pytest.mark.skipif(_mpiexec() is None and not os.environ.get("CI"),
                                 reason="no mpiexec on this machine")]


def _launch(nranks, *args, transpose=None, physical_pass=None):
    env = dict(os.environ, OMP_NUM_THREADS="1")
    for key in ("SHEARMIX_SERIAL", "SHEARMIX_TRANSPOSE", "SHEARMIX_PHYSICAL_PASS"):
        env.pop(key, None)
    if transpose:
        env["SHEARMIX_TRANSPOSE"] = transpose
    if physical_pass:
        env["SHEARMIX_PHYSICAL_PASS"] = physical_pass
    cmd = [_mpiexec(), "-n", str(nranks), sys.executable, PROBE, *args]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=300, env=env)
    assert res.returncode == 0, res.stderr[-2000:]


@pytest.mark.parametrize("transpose", ["shared", "alltoall"])
@pytest.mark.parametrize("nranks", [2, 4])
def test_distributed_fft_matches_numpy(tmp_path, nranks, transpose):
    """Both transposes: through node-shared memory (the default on one node) and
    by message passing (what runs across nodes)."""
    out = str(tmp_path / "fft.npz")
    _launch(nranks, "fft", out, transpose=transpose)
    r = np.load(out)
    assert int(r["size"]) == nranks
    assert str(r["transpose"]) == transpose
    assert r["err_forward"] < 1e-14   # numpy.fft.rfftn is the reference
    assert r["err_inverse"] < 1e-14
    assert r["err_band"] < 1e-12  # same transform, round-off of a different FFTW plan
    assert r["err_round_trip"] < 1e-12  # numpy.fft.rfftn of the products is the reference
    # a round trip of fewer fields than it was prepared for transforms those only
    assert float(r["unused_change"]) == 0.0
    # the node counter the ranks claim round-trip blocks from: unique, complete claims
    assert int(r["counter"]) == (1 if transpose == "shared" else -1)


@pytest.mark.parametrize("model", ["lowpe", "boussinesq"])
def test_same_result_on_1_2_and_4_ranks(tmp_path, model):
    """Against one rank with whole arrays: 1, 2 and 4 ranks either way of making
    the products (block-wise round trips and whole arrays), and block-wise
    with the transposes by message passing."""
    states = {}
    runs = [(1, "whole", None), (2, "whole", None), (4, "whole", None), (1, "blocks", None),
            (2, "blocks", None), (4, "blocks", None), (2, "blocks", "alltoall")]
    for n, kind, transpose in runs:
        out = str(tmp_path / f"s{n}{kind}{transpose}.npz")
        _launch(n, "steps", model, "50", out, physical_pass=kind, transpose=transpose)
        r = np.load(out)
        assert int(r["size"]) == n
        states[n, kind, transpose] = (r["state"], float(r["t"]))
    ref, t_ref = states[1, "whole", None]
    assert np.abs(ref).max() > 0.1
    for key in runs[1:]:
        s, t = states[key]
        assert t == pytest.approx(t_ref, rel=1e-12)
        assert np.abs(s - ref).max() / np.abs(ref).max() < 1e-12


def test_ranks_whose_columns_are_all_dropped(tmp_path):
    """8 ranks on Ny = 16: ranks 3 and 4 hold ky = 6, 7 and -8, -7, all past the
    2/3-rule cutoff (5), so their round trips have no kept rows to transform,
    make or hand on; block-wise (shared memory and Alltoall) against one rank."""
    assert [int(Grid((16, 16, 8), (1.0,) * 3, r, 8).keep_y.sum()) for r in (3, 4)] == [0, 0]
    _launch(1, "steps", "lowpe", "20", str(tmp_path / "one.npz"), physical_pass="whole")
    ref = np.load(tmp_path / "one.npz")["state"]
    for transpose in (None, "alltoall"):
        out = str(tmp_path / f"eight{transpose}.npz")
        _launch(8, "steps", "lowpe", "20", out, physical_pass="blocks", transpose=transpose)
        r = np.load(out)
        assert int(r["size"]) == 8
        assert np.abs(r["state"] - ref).max() < 1e-12 * np.abs(ref).max()
