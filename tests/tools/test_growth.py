"""The growth-phase reader (tools/analysis/growth.py, ``shearmix growth``).

References: exact exponentials with known rates (the phase finder), the
minimax line fit as a linear program solved by ``scipy.optimize.linprog``
(the straightness check), and linear stability theory computed by the
stability tool's eigenproblem (``shearmix.tools.stability.eigen.solve``,
itself checked against Meshalkin & Sinai 1961 in test_stability_*.py) for runs
of the engine.
"""
import json
import math

import h5py
import numpy as np
import pytest
import yaml

from shearmix.tools.analysis.growth import (GrowthOptions, analyse_run, chebyshev_halfwidth,
                                            find_phases, straight_stretches)
from shearmix.tools.cli import main


# ------------------------------------------------------------------ minimax line fit
def test_chebyshev_halfwidth_equals_linear_program():
    """min_{c,s} max_k |y_k - c - s t_k| written as the linear program
    min r subject to -r <= y_k - c - s t_k <= r (definition), solved by HiGHS."""
    from scipy.optimize import linprog
    rng = np.random.default_rng(4)
    for n in (3, 5, 17, 200):
        t = np.sort(rng.uniform(0, 10, n))
        y = 0.3 * t + rng.normal(0, 0.1, n) + 0.02 * t ** 2
        one = np.ones(n)
        # unknowns (c, s, r); rows: -c - s t - r <= -y  and  c + s t - r <= y
        a_ub = np.vstack([np.column_stack([-one, -t, -one]), np.column_stack([one, t, -one])])
        res = linprog([0, 0, 1], A_ub=a_ub, b_ub=np.r_[-y, y], bounds=[(None, None)] * 3,
                      method="highs")
        assert res.status == 0
        assert chebyshev_halfwidth(t, y) == pytest.approx(res.x[2], rel=1e-9, abs=1e-12)


def test_straight_stretch_of_a_bent_line():
    """Two lines meeting at t = 5 (slopes 1 and 3): with a tolerance far below the bend
    the maximal stretches are the two lines, each ending at the bend (exact)."""
    t = np.linspace(0, 10, 101)
    y = np.where(t < 5, t, 5 + 3 * (t - 5))
    got = straight_stretches(t, y, 1e-9)
    assert got == [(0, 50), (50, 100)]
    # thinned candidate ends give the same exact stretches
    assert straight_stretches(t, y, 1e-9, max_points=10) == [(0, 50), (50, 100)]


# ------------------------------------------------------------ phase finder, exact series
def test_exact_exponential_is_one_phase_with_its_rate():
    """Energy exp(2 s t): the amplitude rate is s (not 2 s), over every record."""
    t = np.linspace(0, 5, 60)
    s = 0.731
    p, = find_phases(t, 1e-8 * np.exp(2 * s * t))
    assert (p.first, p.last) == (0, 59)
    assert p.rate == pytest.approx(s, rel=1e-12)
    assert p.interval[0] <= s <= p.interval[1]
    assert p.interval[1] - p.interval[0] < 1e-10


def _transient_and_saturation(t, s=1.0, r=0.5, a=1e-6, b=1e-5, sat=1.0):
    """Energy of a growing mode that saturates at amplitude ``sat`` plus a decaying mode
    (orthogonal, so their energies add): A_g = a e^{st}/sqrt(1 + (a e^{st}/sat)^2)."""
    g = a * np.exp(s * t)
    grow = g / np.sqrt(1 + (g / sat) ** 2)
    return grow ** 2 + (b * np.exp(-r * t)) ** 2


def test_phase_after_the_transient_and_before_saturation():
    t = np.linspace(0, 20, 801)
    e = _transient_and_saturation(t)
    p = find_phases(t, e)[0]
    amp = np.sqrt(e)
    assert t[p.first] > t[np.argmin(amp)]          # after the decaying transient
    assert amp[p.last] < 0.9                        # before the saturated plateau
    assert p.interval[0] <= 1.0 <= p.interval[1]
    # the bent ends inside the default tolerance 0.02 bias the rate low (measured -2.2e-3)
    assert p.rate == pytest.approx(1.0, rel=5e-3)
    # a tighter tolerance moves the phase ends inward and the rate closer to the truth
    q = find_phases(t, e, GrowthOptions(tolerance=0.002))[0]
    assert q.first > p.first and q.last < p.last
    assert abs(q.rate - 1.0) < abs(p.rate - 1.0)
    assert q.rate == pytest.approx(1.0, rel=1e-3)   # measured -3.3e-4


def test_two_growth_phases_longest_first():
    """A slow phase (rate 0.5, t < 10) then a fast one (rate 4, 10 <= t < 11), then a
    plateau: both found, the longest (slow) first; the record at the bend goes to the
    longer. A tolerance far below the bends makes the phase ends exact."""
    t = np.linspace(0, 14, 1401)
    lnA = np.where(t < 10, 0.5 * t, np.where(t < 11, 5 + 4 * (t - 10), 9.0))
    ps = find_phases(t, np.exp(2 * lnA), GrowthOptions(tolerance=1e-9))
    assert [round(p.rate, 9) for p in ps] == [0.5, 4.0]
    assert ps[0].t_end == pytest.approx(10.0) and ps[1].t_start == pytest.approx(10.01)


def test_decay_and_plateau_are_not_growth():
    t = np.linspace(0, 10, 100)
    assert find_phases(t, np.exp(-0.4 * t)) == []
    assert find_phases(t, np.full(t.size, 2.0)) == []
    # growth by less than min_efolds is not a phase
    assert find_phases(t, np.exp(2 * 0.05 * t)) == []


def test_zero_records_split_the_series():
    t = np.linspace(0, 10, 201)
    e = np.exp(2 * 0.8 * t)
    e[100] = 0.0
    ps = find_phases(t, e)
    assert all(p.last < 100 or p.first > 100 for p in ps)
    assert ps[0].rate == pytest.approx(0.8, rel=1e-12)


# ------------------------------------------------------------------------ the command
CASE = {"name": "synthetic", "model": "lowpe", "parameters": {"Re": 20.0, "BPe": 1.0}}


def _series(path, t, **columns):
    path.mkdir(exist_ok=True)
    with h5py.File(path / "timeseries.h5", "w") as fh:
        fh["t"] = t
        for k, v in columns.items():
            fh[k] = v
        fh.attrs["case"] = yaml.safe_dump(CASE)
        fh.attrs["version"] = "test"
    return path


def _run_cli(capsys, *args):
    code = main(["growth", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def test_older_series_too_few_records_and_no_phase_refused(tmp_path, capsys):
    t = np.linspace(0, 5, 50)
    old = _series(tmp_path / "old", t, K=np.ones(50))
    code, out, err = _run_cli(capsys, old, "--no-theory")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "K2d_laminar, K2d_pert, K3d" in err and "timeseries.h5" in err
    few = _series(tmp_path / "few", t[:5], K2d_laminar=np.ones(5), K2d_pert=np.ones(5), K3d=np.ones(5))
    code, _, err = _run_cli(capsys, few, "--no-theory")
    assert code == 2 and err.count("\n") == 1 and "5 records" in err
    flat = _series(tmp_path / "flat", t, K2d_laminar=np.ones(50), K2d_pert=np.exp(-t), K3d=np.ones(50))
    code, _, err = _run_cli(capsys, flat, "--no-theory")
    assert code == 2 and err.count("\n") == 1 and "no exponential growth phase" in err
    code, _, err = _run_cli(capsys, flat, "--tolerance", "0")
    assert code == 2 and "tolerance" in err


def test_json_records_case_and_version_and_is_never_replaced(tmp_path, capsys):
    from shearmix.solver.version import __version__
    t = np.linspace(0, 5, 50)
    run = _series(tmp_path / "run", t, K2d_laminar=np.ones(50), K2d_pert=1e-6 * np.exp(2 * 1.5 * t),
                  K3d=1e-9 * np.exp(2 * 0.4 * t))
    out_json = tmp_path / "g.json"
    code, out, _ = _run_cli(capsys, run, "--no-theory", "--json", out_json)
    assert code == 0 and "2D first" in out
    data = json.loads(out_json.read_text())
    assert data["version"] == __version__ and yaml.safe_load(data["case"])["name"] == "synthetic"
    assert data["phases"]["2d"][0]["rate"] == pytest.approx(1.5, rel=1e-12)
    assert data["phases"]["3d"][0]["rate"] == pytest.approx(0.4, rel=1e-12)
    before = out_json.read_text()
    code, _, err = _run_cli(capsys, run, "--no-theory", "--json", out_json)
    assert code == 2 and "--force" in err and out_json.read_text() == before


# ------------------------------------------------------------------ runs of the engine
def _engine_run(tmp_path, initial, dt, t_end):
    """Low-Pe Kolmogorov flow (Re = 20) in a 2D-only box: Lz = pi/2 puts every kz != 0
    box mode beyond the energy bound (kz^2/Re = 0.8 > U_L kf/2 = 0.5; Serrin 1959), so
    the fastest box mode is the 2D one at kx = 1/2 (stability tool)."""
    from shearmix.solver.case import case_from_dict
    from shearmix.solver.run.simulation import Simulation
    case = case_from_dict({
        "name": "growth", "model": "lowpe", "parameters": {"Re": 20.0, "BPe": 1.0},
        "forcing": {"kf": 1.0, "amplitude": "laminar"},
        "box": {"Lx": "4*pi", "Ly": "2*pi", "Lz": "pi/2"}, "grid": {"Nx": 8, "Ny": 32, "Nz": 4},
        "time": {"dt": dt, "adaptive": False, "t_end": t_end}, "initial": initial,
        "output": {"diagnostics_every": 5, "progress_every": 100000},
        "compute": {"wisdom": "", "fftw_effort": "estimate", "kernels": "numpy", "threads": 1}})
    return case, Simulation


def _linear_2d_rate():
    from shearmix.tools.stability import eigen
    from shearmix.tools.stability.params import FlowParams
    return eigen.solve(FlowParams("lowpe", Re=20.0, kf=1.0, U_L=1.0, BPe=1.0), 0.5, 0.0, 0.0).growth


def test_eigenmode_start_grows_at_the_linear_rate(tmp_path):
    """Started from the fastest box mode at amplitude 1e-6, the 2D family's fitted rate is
    the eigenvalue's real part to 1e-4 (measured: 5e-6)."""
    from shearmix.tools.stability import params_from_case
    from shearmix.tools.stability.boxfit import Box
    from shearmix.tools.stability.modefile import mode_fields, write_mode_file
    mode = tmp_path / "mode.h5"
    case, Simulation = _engine_run(tmp_path, {"kind": "eigenmode", "path": str(mode),
                                              "amplitude": 1e-6}, 0.02, 12.0)
    fields, meta = mode_fields(params_from_case(case), Box.from_case(case), 0.5, 0.0, 0.0)
    write_mode_file(str(mode), fields, meta, case.to_yaml())
    assert Simulation(case).run(output=str(tmp_path / "run")) == 0
    res = analyse_run(tmp_path / "run")
    p = res["phases"]["2d"][0]
    rate = _linear_2d_rate()
    assert p.rate == pytest.approx(rate, rel=1e-4)  # the tolerance
    assert p.efolds > 2.5
    assert res["linear"]["2d"].growth == pytest.approx(rate, rel=1e-9)
    assert (res["linear"]["2d"].i, res["linear"]["2d"].j) == (1, 0)
    assert res["linear"]["3d"] is None and res["phases"]["3d"] == []


def test_noise_start_2d_family_grows_at_the_fastest_box_rate(tmp_path):
    """Laminar flow plus noise (rms 1e-3): after the decay of the other modes and before
    saturation the 2D family grows at the fastest 2D box rate within 2% (measured 0.5%);
    the 3D noise only decays (no 3D box mode is unstable)."""
    case, Simulation = _engine_run(tmp_path, {"kind": "laminar_noise", "amplitude": 1e-3,
                                              "seed": 3}, 0.1, 40.0)
    assert Simulation(case).run(output=str(tmp_path / "run")) == 0
    res = analyse_run(tmp_path / "run", theory=False)
    p = res["phases"]["2d"][0]
    assert p.rate == pytest.approx(_linear_2d_rate(), rel=0.02)  # the tolerance
    assert 0 < p.t_start and p.t_end < res["t_last"]   # transient and saturation cut off
    assert res["phases"]["3d"] == []
