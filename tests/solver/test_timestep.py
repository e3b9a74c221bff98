"""The time-step controller: the CFL rule, the growth limit, the collapse test and
landing on a stop time, alone and as the run loop and ``advance`` use it.

The advective CFL condition ``dt <= C / max(|u|/dx + |v|/dy + |w|/dz)`` is common
practice, no source."""
import pytest

from shearmix.solver.run.simulation import BlowUp, Simulation
from shearmix.solver.run.timestep import TOL, TimeStepControl


def control(**kw):
    base = dict(adaptive=True, cfl=0.5, dt_max=0.1, dt_min=1e-6)
    base.update(kw)
    return TimeStepControl(**base)


def test_cfl_step_is_the_cfl_number_over_the_rate_below_the_ceiling():
    c = control()
    assert c.cfl_step(20.0) == 0.5 / 20.0
    assert c.cfl_step(1.0) == 0.1      # 0.5 > dt_max
    assert c.cfl_step(0.0) == 0.1      # fluid at rest: the ceiling


def test_adaptive_step_grows_at_most_twofold_and_fixed_step_is_the_previous_one():
    c = control()
    assert c.choose(20.0, previous=0.01) == 0.02
    assert c.choose(20.0, previous=0.1) == 0.025
    assert control(adaptive=False).choose(20.0, previous=0.03) == 0.03


def test_collapse_is_an_adaptive_step_below_dt_min():
    assert control().collapsed(1e-7) and not control().collapsed(1e-5)
    assert not control(adaptive=False).collapsed(1e-7)


def test_landing_on_the_stop_time():
    c = control()
    assert c.land(0.0, 0.1, None) == (0.1, False)
    assert c.land(0.0, 0.1, 0.25) == (0.1, False)
    dt, landed = c.land(0.2, 0.1, 0.25)
    assert landed and 0.2 + dt == 0.25
    # a step ending a rounding error short of the stop time lands on it too
    dt, landed = c.land(0.25 - 0.1, 0.1 - 0.5 * TOL, 0.25)
    assert landed and 0.15 + dt == 0.25
    assert c.reached(0.25 - 0.5 * TOL, 0.25) and not c.reached(0.25 - 2 * TOL, 0.25)


def test_run_and_advance_to_end_exactly_on_t_end(make_case, tmp_path):
    """Ten steps of 0.02 add up to 0.19999999999999998 in binary floating point:
    the last step must be stretched onto t_end = 0.2 (the old run loop stopped
    short of it)."""
    t = 0.0
    for _ in range(10):
        t += 0.02
    assert t < 0.2  # the premise of the test
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 8}, time={"t_end": 0.2, "dt": 0.02,
                                                            "adaptive": False},
                     initial={"kind": "laminar"})
    sim = Simulation(case)
    assert sim.run(output=str(tmp_path), log=lambda m: None) == 0
    assert sim.t == 0.2 and sim.step_count == 10
    other = Simulation(case)
    other.advance_to(0.2)
    assert other.t == 0.2 and other.step_count == 10
    assert (other.state == sim.state).all()


def test_advance_and_run_loop_raise_the_same_collapse(make_case, tmp_path):
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 8},
                     time={"t_end": 1.0, "dt_min": 0.05, "dt_max": 0.1, "cfl": 1e-4},
                     initial={"kind": "laminar"})
    sim = Simulation(case)
    with pytest.raises(BlowUp, match="below time.dt_min"):
        sim.advance()
    lines = []
    assert Simulation(case).run(output=str(tmp_path), log=lines.append) == 3
    assert any("below time.dt_min" in ln for ln in lines)
