"""Outputs and diagnostics see a read-only view of the step, and the case is read
only when the simulation is built; the forcing's injection and the quasi-static
field ``lap^-1 w`` against plain numpy.fft arithmetic in physical space."""
import numpy as np
import pytest

from shearmix.solver.case import Case
from shearmix.solver.physics.terms import quasi_static
from shearmix.solver.run.outputs import Output
from shearmix.solver.run.simulation import Simulation
from shearmix.solver.run.stepview import StepView


class Recorder(Output):
    def __init__(self):
        self.seen = []

    def due(self, view):
        return True

    def write(self, view):
        self.seen.append(view)


def test_outputs_receive_a_read_only_view_of_each_step(make_case, tmp_path):
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 8}, time={"t_end": None, "max_steps": 3})
    sim = Simulation(case)
    rec = Recorder()
    assert sim.run(output=str(tmp_path), log=lambda m: None, outputs=[rec]) == 0
    assert [v.step_count for v in rec.seen] == [0, 1, 2, 3]
    view = rec.seen[-1]
    assert isinstance(view, StepView) and not isinstance(view, Simulation)
    assert view.t == sim.t and view.dt == sim.dt
    assert np.array_equal(view.state, sim.state)
    with pytest.raises(ValueError):
        view.state[0, 1, 1, 1] = 1.0  # read only
    with pytest.raises(AttributeError):
        view.t = 0.0


def test_stepping_and_diagnostics_do_not_read_the_case(make_case, monkeypatch):
    case = make_case(grid={"Nx": 8, "Ny": 8, "Nz": 8}, initial={"amplitude": 0.1})
    sim = Simulation(case)

    def refuse(*args, **kw):
        raise AssertionError("the case was read during stepping")
    monkeypatch.setattr(Case, "get", refuse)
    for _ in range(3):
        sim.advance()
    sim.advance_to(sim.t + 0.05)
    assert sim.diagnostics()["K"] > 0


def test_injection_equals_the_volume_mean_of_f_dot_u(make_case):
    """``I = <F.u>`` with ``F = F0 sin(kf y) e_x``, by the rectangle rule on the grid
    (exact for a band-limited product, common practice, no source)."""
    case = make_case(grid={"Nx": 12, "Ny": 16, "Nz": 8}, forcing={"kf": 2.0, "amplitude": 0.7},
                     initial={"amplitude": 0.3, "seed": 3})
    sim = Simulation(case)
    u = sim.physical()[0]
    _, y, _ = sim.grid.physical_coordinates()
    expected = np.mean(0.7 * np.sin(2.0 * y) * u)
    got = sim.diagnostics()["I"]
    assert abs(expected) > 1e-3
    assert got == pytest.approx(expected, rel=1e-12)


def test_quasi_static_field_is_the_inverse_laplacian_of_w_by_numpy_fft(make_case):
    case = make_case(grid={"Nx": 12, "Ny": 16, "Nz": 10}, initial={"amplitude": 0.3, "seed": 5})
    sim = Simulation(case)
    w = sim.physical()[2]
    g = sim.grid
    kx = 2 * np.pi / g.lengths[0] * np.fft.fftfreq(g.shape[0], 1.0 / g.shape[0])
    ky = 2 * np.pi / g.lengths[1] * np.fft.fftfreq(g.shape[1], 1.0 / g.shape[1])
    kz = 2 * np.pi / g.lengths[2] * np.arange(g.shape[2] // 2 + 1)
    k2 = kx[:, None, None] ** 2 + ky[None, :, None] ** 2 + kz[None, None, :] ** 2
    w_k = np.fft.rfftn(w) / w.size
    inv = np.where(k2 == 0, 0.0, -1.0 / np.where(k2 == 0, 1.0, k2))
    expected = 1.7 * inv * w_k
    got = quasi_static(sim.state[1], 1.7, sim.basis, g)
    assert np.abs(expected).max() > 1e-3
    assert np.abs(got - expected).max() <= 1e-14 * np.abs(expected).max() * 10
