"""Shared helpers: small cases built in code, without files; the CLI in a child process."""
import copy
import os
import subprocess
import sys

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

# plans made quickly and no wisdom file touched by the tests
BASE = {
    "model": "lowpe",
    "parameters": {"Re": 50.0, "BPe": 1.0},
    "grid": {"Nx": 16, "Ny": 16, "Nz": 16},
    "time": {"t_end": 1.0},
    "compute": {"fftw_effort": "estimate", "wisdom": ""},
}


def merge(base, extra):
    out = copy.deepcopy(base)
    for k, v in extra.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = merge(out[k], v)
        else:
            out[k] = v
    return out


@pytest.fixture
def make_case():
    from shearmix.solver.case import case_from_dict

    def _make(**sections):
        base = copy.deepcopy(BASE)
        if "parameters" in sections:  # a model's parameters replace the default set
            base["parameters"] = {}
        return case_from_dict(merge(base, sections))
    return _make


@pytest.fixture
def cli_process():
    """``shearmix`` in a fresh serial Python process; ``pre`` is code run first
    (e.g. to make a module unimportable or to kill the process mid-write)."""
    def run(*args, cwd, pre=""):
        code = f"{pre}\nimport sys\nfrom shearmix.tools.cli import main\nsys.exit(main(sys.argv[1:]))"
        env = dict(os.environ, SHEARMIX_SERIAL="1")
        return subprocess.run([sys.executable, "-c", code, *args], cwd=cwd, env=env,
                              capture_output=True, text=True, timeout=120)
    return run
