"""The flow split (docs/equations.md#jet-diagnostics) against its definitions
evaluated directly on the physical velocity with numpy: x averages, z averages,
numpy.fft spectra and finite sums. The velocity is the run's own (projected,
dealiased) field, read back in physical space, so the reference shares no code
with the spectral sums it checks."""
import math

import numpy as np
import pytest

from shearmix.solver.run.simulation import Simulation


def _reference(u, v, w, lengths, kf, BPe):
    """Every split number from the physical fields (whole grid, one rank)."""
    vel = (u, v, w)
    K = 0.5 * sum((c ** 2).mean() for c in vel)
    mean = [c.mean(axis=0, keepdims=True) for c in vel]  # the x-mean flow U(y, z)
    kmean = 0.5 * sum((m ** 2).mean() for m in mean)
    fl = [math.sqrt(((c - m) ** 2).mean()) for c, m in zip(vel, mean)]
    two_d = [c.mean(axis=2, keepdims=True) for c in vel]  # kz = 0 part
    k2d = 0.5 * sum((c ** 2).mean() for c in two_d)
    ny = u.shape[1]
    uy = np.fft.fft(u.mean(axis=(0, 2))) / ny  # x- and z-mean u as a Fourier series in y
    turns = int(round(kf * lengths[1] / (2 * math.pi)))
    laminar = 0.5 * (abs(uy[turns]) ** 2 + abs(uy[-turns]) ** 2)
    # the kz spectrum of U's x component, both signs of kz folded
    nz = u.shape[2]
    Uz = np.fft.fft(mean[0][0], axis=1) / nz
    kz = 2 * math.pi / lengths[2] * np.fft.fftfreq(nz, 1.0 / nz)
    E = (abs(Uz) ** 2).sum(axis=0)
    pos = kz != 0
    lz = 2 * math.pi * E[pos].sum() / (abs(kz[pos]) * E[pos]).sum()
    dz = [np.fft.ifft(1j * kz * np.fft.fft(m[0], axis=1), axis=1).real for m in mean[:2]]
    shear = math.sqrt(sum((d ** 2).mean() for d in dz))
    return {"Kmean": kmean, "Kfluct": K - kmean, "u_fluct_rms": fl[0], "v_fluct_rms": fl[1],
            "w_fluct_rms": fl[2], "isotropy_fluct": fl[2] / math.sqrt(0.5 * (fl[0] ** 2 + fl[1] ** 2)),
            "K2d_laminar": laminar, "K2d_pert": k2d - laminar, "K3d": K - k2d,
            "Lz_jets": lz, "Ri_jets": BPe * (lz / (2 * math.pi)) ** 2 / shear}


@pytest.mark.parametrize("model,params", [
    ("lowpe", {"Re": 50.0, "BPe": 3.0}),
    ("boussinesq", {"Re": 50.0, "B": 2.0, "Pe": 1.5}),
])
def test_split_matches_its_definition_on_a_turbulent_field(make_case, model, params):
    case = make_case(model=model, parameters=params, grid={"Nx": 24, "Ny": 16, "Nz": 12},
                     box={"Lx": 4 * math.pi, "Ly": 2 * math.pi, "Lz": 2 * math.pi},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 3})
    sim = Simulation(case)
    sim.add_mode(0, 1, 2, "vortical", 0.4)  # an x-mean jet varying in y and z
    sim.add_mode(0, 0, 3, "vortical", 0.2)  # a layered jet U(z)
    sim.add_mode(2, 1, 1, "poloidal", 0.3)  # an eddy
    sim.add_mode(1, 2, 0, "vortical", 0.2)  # a two-dimensional perturbation
    for _ in range(5):
        sim.advance()
    u, v, w = sim.physical()[:3]
    ref = _reference(u, v, w, case.lengths, case.kf, case.BPe)
    d = sim.diagnostics()
    assert ref["Kmean"] > 0.05 and ref["Kfluct"] > 1e-3 and ref["K3d"] > 1e-3  # all parts present
    assert ref["K2d_pert"] > 1e-3 and ref["K2d_laminar"] > 0.1
    for key, value in ref.items():
        assert d[key] == pytest.approx(value, rel=1e-10, abs=1e-14), key
    assert d["Kmean"] + d["Kfluct"] == pytest.approx(d["K"], rel=1e-14)


def test_laminar_flow_is_all_laminar_two_dimensional_mean_flow(make_case):
    """The forced laminar flow u = Re F0/kf^2 sin(kf y) e_x (docs/equations.md#forcing):
    its whole energy (Re F0/kf^2)^2/4 is the laminar part of the mean 2D flow."""
    case = make_case(parameters={"Re": 20.0, "BPe": 1.0}, initial={"kind": "laminar"})
    d = Simulation(case).diagnostics()
    amp = 20.0 * case.F0 / case.kf ** 2
    assert d["K2d_laminar"] == pytest.approx(amp ** 2 / 4, rel=1e-13)
    assert d["Kmean"] == pytest.approx(d["K"], rel=1e-13)
    for key in ("Kfluct", "K2d_pert", "K3d", "u_fluct_rms", "w_fluct_rms"):
        assert abs(d[key]) < 1e-12 * d["K"], key
    # no vertical structure: no jet scale, no jet Richardson number
    assert math.isnan(d["Lz_jets"]) and math.isnan(d["Ri_jets"])


def test_split_is_recorded_in_the_series(make_case, tmp_path):
    from shearmix.solver.files.series import read_series

    case = make_case(time={"t_end": 0.2, "dt": 0.05, "adaptive": False},
                     initial={"kind": "laminar_noise", "amplitude": 0.2, "seed": 1},
                     output={"diagnostics_every": 1, "progress_every": 10 ** 6})
    assert Simulation(case).run(output=str(tmp_path / "r"), log=lambda m: None) == 0
    s = read_series(str(tmp_path / "r" / "timeseries.h5"))
    for key in ("Kmean", "Kfluct", "isotropy_fluct", "K2d_laminar", "K2d_pert", "K3d",
                "Lz_jets", "Ri_jets"):
        assert len(s[key]) == 5 and np.all(np.isfinite(s[key])), key
    np.testing.assert_allclose(s["K2d_laminar"] + s["K2d_pert"] + s["K3d"], s["K"], rtol=1e-12)
