"""``kernels.warm_up`` compiles (or loads) exactly the kernels a run uses, for the
argument types the run passes, so that the first step compiles nothing."""
import json
import os
import subprocess
import sys

from shearmix.solver.compute import kernels

PROBE = os.path.join(os.path.dirname(__file__), "warmup_probe.py")


# numba is a hard dependency: without it these tests fail instead of skipping
def test_numba_is_installed():
    assert kernels.HAVE_NUMBA, "numba is missing: it is a dependency (pyproject.toml)"


def _signatures(mode):
    env = dict(os.environ, SHEARMIX_SERIAL="1", OMP_NUM_THREADS="1")
    res = subprocess.run([sys.executable, PROBE, mode], capture_output=True, text=True,
                         timeout=600, env=env)
    assert res.returncode == 0, res.stderr[-2000:]
    return json.loads(res.stdout.strip().splitlines()[-1])


def test_warm_up_compiles_what_production_runs_and_nothing_else():
    warm, used = _signatures("warm"), _signatures("steps")
    assert set(warm) == set(used)
    assert any(used.values())
    missing = {k: sorted(set(used[k]) - set(warm[k])) for k in used if set(used[k]) - set(warm[k])}
    unused = {k: sorted(set(warm[k]) - set(used[k])) for k in warm if set(warm[k]) - set(used[k])}
    assert missing == {}, "compiled at the first step, not by warm_up"
    assert unused == {}, "compiled by warm_up, never used by a run"
