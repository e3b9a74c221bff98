"""Energy budget dK/dt = I - eps + J (docs/equations.md#budget-identities) in nonlinear runs.

The residual recorded in the time series is the difference quotient of K
between consecutive records minus the trapezoidal mean of I - eps + J. The
trapezoidal rule is second order (common practice), so if the reported terms
are consistent with the dynamics the residual falls four-fold when the step
is halved, and it stays below 1e-3 of the mean injection at the finer step
(a bound of ours).
"""
import numpy as np
import pytest

from shearmix.solver.files.series import read_series
from shearmix.solver.run.simulation import Simulation


def _max_residual(make_case, tmp_path, model, params, dt):
    case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 16, "Nz": 16},
                     time={"t_end": 2.0, "dt": dt, "adaptive": False},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 5},
                     output={"diagnostics_every": 1, "progress_every": 10 ** 6})
    sim = Simulation(case)
    if model == "boussinesq":  # the full model's noise is in T: stir the velocity as well
        sim.add_mode(1, 1, 1, "poloidal", 0.3)
        sim.add_mode(1, 2, 2, "vortical", 0.3)
    out = tmp_path / f"dt{dt}"
    assert sim.run(output=str(out), log=lambda m: None) == 0
    s = read_series(str(out / "timeseries.h5"))
    res = s["budget_residual"][1:]
    assert np.all(np.isfinite(res)) and len(res) == round(2.0 / dt)
    # the flow is far from steady: K changes at a rate comparable to I
    assert np.abs(np.diff(s["K"]) / np.diff(s["t"])).max() > 0.1 * s["I"].mean()
    assert s["attrs"]["model"] == model and "version" in s["attrs"]
    return np.abs(res).max() / np.abs(s["I"]).mean()


@pytest.mark.parametrize("model,params", [
    ("lowpe", {"Re": 60.0, "BPe": 2.0}),
    ("boussinesq", {"Re": 60.0, "B": 2.0, "Pr": 1.0}),
])
def test_budget_residual_is_second_order_and_small(make_case, tmp_path, model, params):
    coarse = _max_residual(make_case, tmp_path, model, params, 0.01)
    fine = _max_residual(make_case, tmp_path, model, params, 0.005)
    assert 3.5 < coarse / fine < 4.5, (coarse, fine)
    assert fine < 1e-3
