"""Restarts in one process: bit-for-bit continuation, resolution and model changes, checks.

References outside the engine: exact equality for continuation; numpy.fft
(rfftn/irfftn) for resampling and for the Laplacian of the quasi-static
temperature.
"""
import os
import sys

import h5py
import numpy as np
import pytest

from shearmix.solver.compute.parallel import SerialComm
from shearmix.solver.files.checkpoint import (
    FOLDER,
    checkpoint_path,
    read_checkpoint_header,
    write_checkpoint,
)
from shearmix.solver.files.series import read_series
from shearmix.solver.run.restart import RestartError, apply, changes, check, truncate_series
from shearmix.solver.run.simulation import Simulation

sys.path.insert(0, os.path.dirname(__file__))
import checkpoint_probe as probe  # noqa: E402


def test_continuation_is_bit_for_bit_on_one_rank(tmp_path):
    straight = probe.run(probe.probe_case(probe.STEPS), str(tmp_path / "straight"))
    probe.run(probe.probe_case(probe.FIRST), str(tmp_path / "split"))
    ckpt = checkpoint_path(str(tmp_path / "split" / FOLDER), probe.FIRST)
    split = probe.run(probe.probe_case(probe.STEPS - probe.FIRST), str(tmp_path / "split"), ckpt)
    assert split.step_count == straight.step_count == probe.STEPS
    assert np.array_equal(split.state, straight.state)
    assert (split.t, split.dt) == (straight.t, straight.dt)
    assert len(set(np.diff(read_series(str(tmp_path / "straight" / "timeseries.h5"))["t"]))) > 1
    a = read_series(str(tmp_path / "straight" / "timeseries.h5"))
    b = read_series(str(tmp_path / "split" / "timeseries.h5"))
    for name in ("t", "step", "K", "eps", "J"):  # the series continues as if never stopped
        assert np.array_equal(a[name], b[name]), name
    h = read_checkpoint_header(checkpoint_path(str(tmp_path / "split" / FOLDER), probe.STEPS))
    assert [e["event"] for e in h["history"]] == ["start", "restart"]
    assert h["history"][1]["changes"] == {"time.max_steps": [probe.FIRST, probe.STEPS - probe.FIRST]}
    assert h["history"][1]["step"] == probe.FIRST


def _noisy(make_case, grid, modes, model="lowpe", steps=1, **extra):
    params = {"Re": 40.0, "BPe": 2.0} if model == "lowpe" else {"Re": 40.0, "B": 2.0, "Pe": 20.0}
    case = make_case(model=model, parameters=params, grid=grid,
                     initial={"amplitude": 0.5, "noise_modes": modes, "seed": 9}, **extra)
    sim = Simulation(case)
    for _ in range(steps):
        sim.advance()
    return sim


def _write(sim, folder):
    os.makedirs(folder, exist_ok=True)
    return write_checkpoint(sim, str(folder))


def _restarted(case, path):
    sim = Simulation(case, initial=False)
    apply(sim, path, check(path, case, SerialComm()))
    return sim


def _resample(field, shape):
    """numpy reference: keep the modes both grids keep under the 2/3 rule, zero the rest."""
    old = field.shape
    coef = np.fft.fftn(field) / field.size
    out = np.zeros(shape, complex)
    cut = [min((a - 1) // 3, (b - 1) // 3) for a, b in zip(old, shape)]
    idx = [np.arange(-c, c + 1) for c in cut]
    ix = np.ix_(*idx)
    out[tuple(i % n for i, n in zip(ix, shape))] = coef[tuple(i % n for i, n in zip(ix, old))]
    return np.real(np.fft.ifftn(out)) * out.size


def test_resolution_change_up_and_down_keeps_common_modes_exactly(make_case, tmp_path):
    coarse_grid = {"Nx": 16, "Ny": 16, "Nz": 16}
    fine_grid = {"Nx": 24, "Ny": 32, "Nz": 20}
    coarse = _noisy(make_case, coarse_grid, 5, steps=2)  # fills the whole coarse band
    c_path = _write(coarse, tmp_path / "c")
    fine_case = make_case(parameters={"Re": 40.0, "BPe": 2.0}, grid=fine_grid)
    fine = _restarted(fine_case, c_path)
    for got, ref in zip(fine.physical()[:3], coarse.physical()[:3]):
        expect = _resample(ref, (24, 32, 20))
        assert np.abs(got - expect).max() < 1e-13 * np.abs(expect).max()
    # and back: every coarse mode survived the trip bit for bit
    f_path = _write(fine, tmp_path / "f")
    back = _restarted(coarse.case, f_path)
    assert np.array_equal(back.state, coarse.state)

    # down from a field with modes the coarse grid cannot hold
    rich = _noisy(make_case, fine_grid, 6)
    assert np.abs(rich.state[:, 7]).max() > 0  # nx = 7 > coarse cutoff 5
    r_path = _write(rich, tmp_path / "r")
    down = _restarted(coarse.case, r_path)
    for got, ref in zip(down.physical()[:3], rich.physical()[:3]):
        expect = _resample(ref, (16, 16, 16))
        assert np.abs(got - expect).max() < 1e-13 * np.abs(expect).max()


def test_lowpe_to_boussinesq_sets_T_from_the_quasi_static_balance(make_case, tmp_path):
    low = _noisy(make_case, {"Nx": 16, "Ny": 16, "Nz": 16}, 4, steps=2)
    path = write_checkpoint(low, str(tmp_path))
    full_case = make_case(model="boussinesq", parameters={"Re": 40.0, "B": 0.1, "Pe": 20.0})
    full = _restarted(full_case, path)
    assert np.array_equal(full.state[:2], low.state)
    _, _, w, T = full.physical()
    # docs/equations.md#models: T = Pe lap^-1 w, i.e. lap T = Pe w; Laplacian by numpy.fft
    k = [2 * np.pi * np.fft.fftfreq(n, L / n) for n, L in zip(T.shape, full_case.lengths)]
    k2 = k[0][:, None, None] ** 2 + k[1][None, :, None] ** 2 + k[2][None, None, :] ** 2
    lap_T = np.real(np.fft.ifftn(-k2 * np.fft.fftn(T)))
    assert np.abs(w).max() > 1e-3
    assert np.abs(lap_T - 20.0 * w).max() < 1e-11 * np.abs(20.0 * w).max()
    event = read_checkpoint_header(_write(full, tmp_path / "b"))["history"][-1]
    assert event["changes"]["model"] == ["lowpe", "boussinesq"]
    assert event["changes"]["parameters.BPe"] == [2.0, None]


def test_boussinesq_to_lowpe_keeps_velocity_and_drops_T(make_case, tmp_path):
    full = _noisy(make_case, {"Nx": 16, "Ny": 16, "Nz": 16}, 4, model="boussinesq", steps=2)
    assert np.abs(full.state[2]).max() > 0
    path = write_checkpoint(full, str(tmp_path))
    low = _restarted(make_case(parameters={"Re": 40.0, "BPe": 40.0}), path)
    assert low.fields == ("a", "p") and np.array_equal(low.state, full.state[:2])
    assert (low.t, low.step_count, low.dt) == (full.t, full.step_count, full.dt)


def test_box_cannot_change_and_t_end_must_lie_ahead(make_case, tmp_path):
    sim = _noisy(make_case, {"Nx": 16, "Ny": 16, "Nz": 16}, 2)
    path = write_checkpoint(sim, str(tmp_path))
    header = read_checkpoint_header(path)
    with pytest.raises(RestartError, match=r"^box.Lz: cannot change at restart"):
        changes(header, make_case(box={"Lz": "3*pi"}), path)
    with pytest.raises(RestartError, match=r"^time.t_end: the checkpoint .* is at t = "):
        check(path, make_case(time={"t_end": sim.t}), SerialComm())
    diff = changes(header, make_case(parameters={"Re": 80.0, "BPe": 2.0},
                                     forcing={"amplitude": "unit"},
                                     initial={"seed": 99}), path)
    assert diff == {"parameters.Re": [40.0, 80.0], "forcing.amplitude": ["laminar", "unit"]}


def test_truncate_series_drops_records_from_the_checkpoint_step_on(tmp_path):
    path = tmp_path / "timeseries.h5"
    with h5py.File(path, "w") as fh:
        for name, values in (("step", [0, 3, 6, 9, 10]), ("K", [1.0, 2, 3, 4, 5])):
            fh.create_dataset(name, data=np.array(values, float), maxshape=(None,))
    assert truncate_series(str(path), 6) == 3
    with h5py.File(path) as fh:
        assert list(fh["step"][()]) == [0, 3] and list(fh["K"][()]) == [1.0, 2.0]
    assert truncate_series(str(path), 6) == 0
    assert truncate_series(str(tmp_path / "absent.h5"), 6) == 0
