"""The full model tends to the low-Peclet model as Pe -> 0 with B*Pe fixed.

docs/equations.md#models: with T = Pe lap^{-1} w + O(Pe^2) the momentum equations
coincide, so the velocity difference after a fixed time must shrink like Pe
(the low-Peclet reduction of docs/equations.md#models is the limit being
checked; the first-order rate is common practice for such expansions).
"""
import numpy as np

from shearmix.solver.run.simulation import Simulation


def test_full_model_converges_to_low_peclet_model(make_case):
    Re, BPe, t_end = 50.0, 10.0, 0.5
    common = dict(grid={"Nx": 16, "Ny": 16, "Nz": 16}, time={"dt": 0.01, "adaptive": False},
                  initial={"kind": "laminar_noise", "amplitude": 0.05, "seed": 3})
    low = Simulation(make_case(parameters={"Re": Re, "BPe": BPe}, **common))
    start = low.state.copy()
    low.advance_to(t_end)
    diffs = []
    for Pe in (1e-2, 1e-3, 1e-4):
        full = Simulation(make_case(model="boussinesq",
                                    parameters={"Re": Re, "B": BPe / Pe, "Pe": Pe}, **common))
        full.state[:2] = start
        k2 = np.where(full.grid.k2 == 0, 1.0, full.grid.k2)
        full.state[2] = Pe * full.basis.alpha * start[1] / k2  # T = Pe lap^-1 w
        full.advance_to(t_end)
        diffs.append(np.abs(full.state[:2] - low.state).max() / np.abs(low.state).max())
    # first order in Pe: each tenfold drop of Pe divides the difference by about ten
    assert diffs[0] > diffs[1] > diffs[2]
    assert 5 < diffs[0] / diffs[1] < 20 and 5 < diffs[1] / diffs[2] < 20, diffs
    assert diffs[2] < 1e-6
