"""Slab decomposition under MPI: transforms against numpy.fft, and results
independent of the rank count (1, 2, 4 and 8 ranks; more than 2 oversubscribe
2 cores)."""
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest

from shearmix.solver.compute import kernels
from shearmix.solver.grid import Grid

PROBE = os.path.join(os.path.dirname(__file__), "mpi_probe.py")


def _mpiexec():
    """The mpiexec beside this Python (scripts/setup installs one), else on PATH."""
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    found = here if os.path.exists(here) else shutil.which("mpiexec")
    if found is None:
        pytest.fail("no mpiexec: scripts/setup installs one into .venv/bin; deselect with -m 'not mpi'")
    return found


# no skip without mpiexec: scripts/setup installs one; deselect with -m "not mpi"
pytestmark = pytest.mark.mpi


def _launch(nranks, *args):
    env = dict(os.environ, OMP_NUM_THREADS="1")
    for key in ("SHEARMIX_SERIAL", "SHEARMIX_TRANSPOSE", "SHEARMIX_PHYSICAL_PASS",
                "SHEARMIX_PRODUCT_PASS", "SHEARMIX_KERNELS"):
        env.pop(key, None)
    cmd = [_mpiexec(), "-n", str(nranks), sys.executable, PROBE, *args]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=600, env=env)
    assert res.returncode == 0, res.stderr[-2000:]


@pytest.mark.parametrize("transpose", ["shared", "alltoall"])
@pytest.mark.parametrize("nranks", [2, 4])
def test_distributed_fft_matches_numpy(tmp_path, nranks, transpose):
    """Both transposes: through node-shared memory (the default on one node) and
    by message passing (what runs across nodes)."""
    out = str(tmp_path / "fft.npz")
    _launch(nranks, "fft", out, transpose)
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


#: the compiled kernels where Numba is installed (else both paths are NumPy's)
COMPILED = "numba" if kernels.HAVE_NUMBA else "numpy"


def _paths(nranks):
    """Every way through the tendency on ``nranks`` ranks: product pass x transpose
    x kernels (one rank has no transpose)."""
    transposes = ("auto",) if nranks == 1 else ("shared", "alltoall")
    return [f"{p}/{t}/{k}" for p in ("blocks", "whole") for t in transposes
            for k in ("numba", "numpy")]


@pytest.mark.parametrize("model", ["lowpe", "boussinesq"])
def test_same_result_on_1_2_and_4_ranks_along_every_path(tmp_path, model):
    """Against one rank with whole arrays and the NumPy kernels (the plain
    definitions): 1, 2 and 4 ranks, each product pass (block-wise round trips and
    whole arrays), each transpose (node shared memory and Alltoall messages) and
    each kernel backend (compiled and NumPy); each path checked to be the one taken."""
    states = {}
    for n in (1, 2, 4):
        out = str(tmp_path / f"s{n}.npz")
        paths = _paths(n)
        _launch(n, "steps", model, "50", out, ",".join(paths))
        r = np.load(out)
        assert int(r["size"]) == n
        for path in paths:
            p, t, k = path.split("/")
            want = "/".join((p, "single" if n == 1 else t, COMPILED if k == "numba" else k))
            assert str(r[f"used_{path}"]) == want
            states[n, path] = (r[f"state_{path}"], float(r[f"t_{path}"]), r[f"diag_{path}"])
            keys = list(r["diag_keys"])
    assert len(states) == 4 + 8 + 8
    ref, t_ref, d_ref = states[1, "whole/auto/numpy"]
    assert np.abs(ref).max() > 0.1
    assert {"Kmean", "K2d_pert", "Lz_jets", "Ri_jets"} <= set(keys)
    finite = np.isfinite(d_ref)
    assert finite.sum() > 30  # everything but the budget residuals and unset Pe
    for key, (s, t, d) in states.items():
        assert t == pytest.approx(t_ref, rel=1e-12), key
        assert np.abs(s - ref).max() / np.abs(ref).max() < 1e-12, key
        # every reported number, including the flow split's kx = 0 plane and kz spectrum
        assert np.array_equal(np.isfinite(d), finite), key
        np.testing.assert_allclose(d[finite], d_ref[finite], rtol=1e-10, atol=1e-14,
                                   err_msg=str(key))


def test_ranks_whose_columns_are_all_dropped(tmp_path):
    """8 ranks on Ny = 16: ranks 3 and 4 hold ky = 6, 7 and -8, -7, all past the
    2/3-rule cutoff (5), so their round trips have no kept rows to transform,
    make or hand on; block-wise (shared memory and Alltoall) against one rank."""
    assert [int(Grid((16, 16, 8), (1.0,) * 3, r, 8).keep_y.sum()) for r in (3, 4)] == [0, 0]
    _launch(1, "steps", "lowpe", "20", str(tmp_path / "one.npz"), "whole/auto/numba")
    ref = np.load(tmp_path / "one.npz")["state_whole/auto/numba"]
    paths = ["blocks/shared/numba", "blocks/alltoall/numba"]
    out = str(tmp_path / "eight.npz")
    _launch(8, "steps", "lowpe", "20", out, ",".join(paths))
    r = np.load(out)
    assert int(r["size"]) == 8
    for path in paths:
        assert np.abs(r[f"state_{path}"] - ref).max() < 1e-12 * np.abs(ref).max()
