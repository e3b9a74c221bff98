"""Every shipped case and sweep file loads through the program's own checks.

A config that no longer validates (a renamed key, a value out of range) is a
broken example for users; the loaders are the ones ``shearmix check`` and
``shearmix sweep expand`` use.
"""
import pathlib

import pytest
import yaml

from shearmix.solver.case import load_case
from shearmix.tools.sweeps.spec import load_sweep

CONFIGS = pathlib.Path(__file__).resolve().parent.parent / "configs"
# regime-threshold files are read (and tested) by the analysis, not as cases
FILES = sorted(p for p in CONFIGS.rglob("*.yaml") if not p.name.startswith("regime-thresholds"))


def _is_sweep(path):
    return "sweep" in (yaml.safe_load(path.read_text()) or {})


def test_the_configs_folder_is_found():
    assert len(FILES) >= 6


@pytest.mark.parametrize("path", FILES, ids=lambda p: str(p.relative_to(CONFIGS)))
def test_config_validates(path):
    if _is_sweep(path):
        sweep = load_sweep(str(path))
        assert len(sweep.members) >= 2
    else:
        case = load_case(str(path))
        assert case.Re > 0
