"""Passive tracers (docs/equations.md#tracers) against exact solutions and identities."""
import math
import os
import subprocess
import sys

import h5py
import numpy as np
import pytest

from shearmix.solver.case import CaseError, case_from_dict
from shearmix.solver.run.simulation import Simulation


def _case(make_case, **extra):
    base = dict(grid={"Nx": 16, "Ny": 16, "Nz": 16},
                time={"t_end": None, "max_steps": 50, "adaptive": False, "dt": 0.01})
    base.update(extra)
    return make_case(**base)


def _mode_amplitude(sim, field, n):
    """The spectral amplitude of the mode with wave indices ``n`` (one rank)."""
    g = sim.grid
    nx, ny, nz = n
    return sim.state[sim.fields.index(field)][nx % g.shape[0], ny % g.shape[1], nz]


@pytest.mark.parametrize("model", ["lowpe", "boussinesq"])
def test_a_mode_at_rest_decays_at_its_diffusion_rate(make_case, model):
    """Exact solution of the heat equation: ``c_k(t) = c_k(0) exp(-|k|^2 t/Pe_c)``."""
    params = {"Re": 20.0, "BPe": 1.0} if model == "lowpe" else {"Re": 20.0, "B": 1.0, "Pe": 5.0}
    case = _case(make_case, model=model, parameters=params, forcing={"amplitude": 0.0},
                 initial={"kind": "rest"},
                 tracers={"salt": {"Pe": 7.0, "initial": {"kind": "mode", "nx": 1, "ny": 2,
                                                           "nz": 3, "amplitude": 0.3}}})
    k2 = sum((2 * math.pi / L * n) ** 2 for L, n in zip(case.lengths, (1, 2, 3)))
    exact = math.exp(-k2 * 0.5 / 7.0)
    errors = []
    for dt in (0.01, 0.005):
        sim = Simulation(case)
        c0 = _mode_amplitude(sim, "c.salt", (1, 2, 3))
        assert abs(c0) == pytest.approx(0.15)  # cos = (e^{ik.x} + e^{-ik.x})/2
        sim.advance_to(0.5, dt=dt)
        ratio = _mode_amplitude(sim, "c.salt", (1, 2, 3)) / c0
        assert abs(ratio.imag) < 1e-14
        errors.append(abs(ratio.real - exact) / exact)
    assert errors[0] < 1e-6
    assert errors[0] / errors[1] > 3.5  # the implicit scheme's order (at least 2)


def test_linear_response_to_the_mean_gradient_is_the_exact_2x1_solution(make_case):
    """One poloidal velocity mode (a single plane wave: its advection vanishes) and the
    tracer it stirs out of the mean gradient obey the linear system (exact solution)
    ``p' = lp p``, ``c' = lc c + G alpha p``:
    ``c(t) = G alpha p0 (e^{lp t} - e^{lc t})/(lp - lc)``."""
    Re, BPe, Pe_c, G = 20.0, 2.0, 9.0, 1.5
    n = (1, 0, 1)
    case = _case(make_case, model="lowpe", parameters={"Re": Re, "BPe": BPe},
                 forcing={"amplitude": 0.0},
                 initial={"kind": "mode", "amplitude": 0.2,
                          "mode": {"nx": 1, "ny": 0, "nz": 1, "component": "poloidal"}},
                 tracers={"salt": {"Pe": Pe_c, "gradient": G}})
    sim = Simulation(case)
    kx, ky, kz = (2 * math.pi / L * m for L, m in zip(case.lengths, n))
    k2 = kx * kx + ky * ky + kz * kz
    alpha = math.sqrt(kx * kx + ky * ky) / math.sqrt(k2)
    lp = -k2 / Re - BPe * alpha ** 2 / k2
    lc = -k2 / Pe_c
    p0 = _mode_amplitude(sim, "p", n)
    assert abs(p0) > 0.05
    sim.advance_to(1.0, dt=0.005)
    want_p = p0 * math.exp(lp)
    want_c = G * alpha * p0 * (math.exp(lp) - math.exp(lc)) / (lp - lc)
    assert abs(_mode_amplitude(sim, "p", n) - want_p) < 1e-9 * abs(p0)
    assert abs(_mode_amplitude(sim, "c.salt", n) - want_c) < 1e-9 * abs(p0)


def test_full_model_without_buoyancy_a_tracer_is_the_temperature(make_case):
    """With ``B = 0``, ``Pe_c = Pe`` and ``G = 1`` the tracer equation is the temperature
    equation (docs/equations.md#tracers): the same initial field stays the same to
    round-off through 100 nonlinear steps."""
    case = _case(make_case, model="boussinesq", parameters={"Re": 60.0, "B": 0.0, "Pe": 30.0},
                 initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 3},
                 tracers={"twin": {"Pe": 30.0}}, time={"t_end": None, "max_steps": 100,
                                                       "dt": 0.01, "cfl": 0.5})
    sim = Simulation(case)
    sim.add_mode(1, 1, 1, "poloidal", 0.5)
    sim.add_mode(1, 2, 1, "vortical", 0.5)
    iT, ic = sim.fields.index("T"), sim.fields.index("c.twin")
    sim.state[ic] = sim.state[iT]
    for _ in range(100):
        sim.advance()
    T = sim.state[iT]
    assert np.abs(T).max() > 1e-3 and sim.t > 0.5
    assert np.abs(sim.state[ic] - T).max() < 1e-12 * np.abs(T).max()


def _series(path):
    with h5py.File(os.path.join(path, "timeseries.h5"), "r") as fh:
        return {k: fh[k][()] for k in fh}


def test_the_tracer_budget_closes_at_second_order_in_the_record_spacing(make_case, tmp_path):
    """``d/dt <c^2>/2 = -G <w c> - chi_c`` exactly (docs/equations.md#tracers); the
    residual of its difference quotient against the trapezoid of the right-hand side
    falls as the square of the record spacing (trapezoid rule, common practice)."""
    worst = []
    for every in (8, 4):
        case = _case(make_case, model="lowpe", parameters={"Re": 60.0, "BPe": 1.0},
                     initial={"kind": "laminar_noise", "amplitude": 0.5, "seed": 5},
                     time={"t_end": None, "max_steps": 96, "adaptive": False, "dt": 0.004},
                     output={"diagnostics_every": every},
                     tracers={"salt": {"Sc": 1.0, "gradient": 2.0}})
        sim = Simulation(case)
        sim.add_mode(1, 1, 1, "poloidal", 2.0)
        assert sim.run(output=str(tmp_path / f"e{every}"), log=lambda m: None) == 0
        s = _series(str(tmp_path / f"e{every}"))
        r = s["c_budget_residual.salt"][1:]
        scale = np.abs(2.0 * s["wc.salt"]).max()
        assert np.isfinite(r).all() and scale > 1e-3
        worst.append(np.abs(r[-4:]).max() / scale)
    assert worst[1] < 0.02
    assert 3.0 < worst[0] / worst[1] < 5.0  # halving the spacing: 4x smaller


def test_restart_with_tracers_is_bit_for_bit_and_tracers_can_be_added_and_removed(
        make_case, tmp_path):
    from shearmix.solver.compute.parallel import SerialComm
    from shearmix.solver.files.checkpoint import FOLDER, list_checkpoints
    from shearmix.solver.run.restart import apply, check
    tracers = {"a": {"Sc": 1.0, "initial": {"kind": "mode", "nx": 1, "nz": 1}}, "b": {"Pe": 50.0}}
    kw = dict(model="lowpe", parameters={"Re": 60.0, "BPe": 1.0},
              initial={"kind": "laminar_noise", "amplitude": 0.5, "seed": 5},
              output={"checkpoint_every": 0.1}, tracers=tracers)
    steps = lambda n: {"t_end": None, "max_steps": n, "adaptive": False, "dt": 0.01}
    whole = Simulation(_case(make_case, time=steps(20), **kw))
    assert whole.run(output=str(tmp_path / "whole"), log=lambda m: None) == 0
    half_case = _case(make_case, time=steps(10), **kw)
    assert Simulation(half_case).run(output=str(tmp_path / "half"), log=lambda m: None) == 0
    (_, ckpt), = list_checkpoints(str(tmp_path / "half" / FOLDER))
    rest_case = half_case  # max_steps counts from the restart
    again = Simulation(rest_case, initial=False)
    apply(again, ckpt, check(ckpt, rest_case, SerialComm()))
    assert again.run(output=str(tmp_path / "half"), append=True, log=lambda m: None) == 0
    assert np.array_equal(again.state, whole.state)

    # drop b, add c: b is gone, c starts from its initial state (zero), a continues
    changed = rest_case.with_overrides({"tracers.b": None, "tracers.c.Sc": 3.0})
    third = Simulation(changed, initial=False)
    (_, ckpt), = list_checkpoints(str(tmp_path / "half" / FOLDER))[-1:]
    apply(third, ckpt, check(ckpt, changed, SerialComm()))
    assert third.fields == ("a", "p", "c.a", "c.c")
    assert np.array_equal(third.state[2], again.state[2])
    assert not third.state[3].any()
    event = third.history[-1]
    assert event["tracers_added"] == ["c"] and event["tracers_removed"] == ["b"]
    assert third.run(output=str(tmp_path / "half"), append=True, log=lambda m: None) == 0
    s = _series(str(tmp_path / "half"))
    step, cc, cb = s["step"], s["c_rms.c"], s["c_rms.b"]
    assert len(cc) == len(step) == len(cb) and step[-1] == 30
    assert np.isnan(cc[step < 20]).all() and np.isfinite(cc[step >= 20]).all()
    assert np.isfinite(cb[step < 20]).all() and np.isnan(cb[step >= 20]).all()


@pytest.mark.mpi
def test_two_tracers_agree_on_1_2_and_4_ranks(tmp_path):
    """The same nonlinear case with two tracers on 1, 2 and 4 ranks, over both product
    passes and both transposes, against one rank (round-off, 1e-12)."""
    from test_mpi import _launch
    paths = ["whole/shared/numba", "blocks/shared/numba", "blocks/alltoall/numba",
             "whole/alltoall/numpy"]
    states = {}
    for n in (1, 2, 4):
        out = str(tmp_path / f"s{n}.npz")
        _launch(n, "steps", "lowpe", "30", out, ",".join(paths), "tracers")
        r = np.load(out)
        for path in paths:
            states[n, path] = r[f"state_{path}"]
    ref = states[1, "whole/shared/numba"]
    assert ref.shape[0] == 4  # a, p and two tracers
    assert np.abs(ref[2:]).max() > 1e-3
    for key, s in states.items():
        assert np.abs(s - ref).max() < 1e-12 * np.abs(ref).max(), key


@pytest.mark.parametrize("tracers, message", [
    ({"salt": {"Sc": -1.0}}, "tracers.salt.Sc: must be a number > 0"),
    ({"salt": {"Pe": 0.0}}, "tracers.salt.Pe: must be a number > 0"),
    ({"salt": {"Sc": 1.0, "Pe": 20.0}}, "tracers.salt: Pe and Sc both given"),
    ({"Sc": 1.0}, "a tracer needs a name"),
    ({"salt": {"Sc": 1.0, "diffusivity": 2}}, "tracers.salt.diffusivity: unknown tracer key"),
    ({"salt": {}}, "needs its Peclet number Pe or its Schmidt number Sc"),
    ({"2x": {"Sc": 1.0}}, "is not a tracer name"),
])
def test_bad_tracer_input_is_one_line(make_case, tracers, message):
    with pytest.raises(CaseError, match=message) as err:
        make_case(tracers=tracers)
    assert "\n" not in str(err.value)


def test_bad_tracer_on_the_command_line_exits_2_with_one_line(cli_process, tmp_path):
    case = tmp_path / "c.yaml"
    case.write_text("model: lowpe\nparameters: {Re: 20, BPe: 1}\ntime: {t_end: 1}\n"
                    "tracers:\n  salt: {Sc: 1, Pe: 3}\n")
    for args in (["check", str(case)],
                 ["run", str(case), "-o", str(tmp_path / "r")],
                 ["check", str(case), "--set", "tracers.salt.Sc=-2"]):
        res = cli_process(*args, cwd=str(tmp_path))
        assert res.returncode == 2, res.stderr
        assert len(res.stderr.strip().splitlines()) == 1, res.stderr
        assert "tracers.salt" in res.stderr
    assert not (tmp_path / "r").exists()
