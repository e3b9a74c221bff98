"""Snapshots: physical fields against analytic ones, the XDMF sidecar against its standard.

XDMF structure checked (from the XDMF model and format description at
xdmf.org, and from memory of how VTK's reader maps it): root ``Xdmf`` >
``Domain`` > ``Grid`` (Uniform) with ``Time``, a ``Topology`` of type
``3DCoRectMesh`` whose ``Dimensions`` list the slowest axis first, a
``Geometry`` of type ``ORIGIN_DXDYDZ`` with two 3-value ``DataItem``s in the
same axis order as ``Dimensions``, and ``Attribute``s whose ``DataItem``
(``Format="HDF"``) text is ``file.h5:/dataset``.
"""
import os
import sys
import xml.etree.ElementTree as ET

import h5py
import numpy as np
import pytest

from shearmix.solver.files.fileheader import read_header
from shearmix.solver.files.snapshots import write_snapshot
from shearmix.solver.run.simulation import Simulation
from shearmix.solver.version import __version__


def _analytic(case, x, y, z):
    """A divergence-free velocity (each component independent of its own coordinate),
    its low-Peclet buoyancy b = BPe lap^-1 w and a temperature, from pencil-and-paper."""
    kx = 2 * np.pi / case.Lx
    u = np.sin(2 * y) * np.cos(z) + 0 * x
    v = np.cos(x) + 0 * y + 0 * z
    w = np.cos(kx * x) * np.sin(y) + 0 * z
    b = -2.0 * np.cos(kx * x) * np.sin(y) / (kx ** 2 + 1) + 0 * z  # BPe = 2
    T = 0.5 * np.cos(kx * x + 2 * z) + 0 * y
    return {"u": u, "v": v, "w": w, "b": b, "T": T}


def _sim(make_case, model):
    params = {"Re": 50.0, "BPe": 2.0} if model == "lowpe" else {"Re": 50.0, "B": 1.0, "Pe": 10.0}
    case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 16, "Nz": 8})
    sim = Simulation(case, initial=False)
    f = _analytic(case, *sim.grid.physical_coordinates())
    one = np.ones(sim.grid.physical_shape)
    sim.set_physical(f["u"] * one, f["v"] * one, f["w"] * one,
                     f["T"] * one if model == "boussinesq" else None)
    sim.t, sim.step_count = 1.25, 7
    return sim


def _points(case, shape_zyx, stride):
    nz, ny, nx = shape_zyx
    x = (np.arange(nx) * stride * case.Lx / case.Nx)[None, None, :]
    y = (np.arange(ny) * stride * case.Ly / case.Ny)[None, :, None]
    z = (np.arange(nz) * stride * case.Lz / case.Nz)[:, None, None]
    return x, y, z


@pytest.mark.parametrize("model,stride,single", [("lowpe", 1, False), ("boussinesq", 3, True)])
def test_fields_match_analytic_values(make_case, tmp_path, model, stride, single):
    sim = _sim(make_case, model)
    path = write_snapshot(sim, str(tmp_path), single=single, stride=stride)
    names = ["u", "v", "w", "b" if model == "lowpe" else "T"]
    expect_shape = tuple(-(-n // stride) for n in (8, 16, 16))  # (nz, ny, nx)
    with h5py.File(path) as fh:
        assert sorted(fh) == sorted(names)
        assert fh.attrs["case"] == sim.case.to_yaml() and fh.attrs["version"] == __version__
        ref = _analytic(sim.case, *_points(sim.case, expect_shape, stride))
        for name in names:
            data = fh[name][()]
            assert data.shape == expect_shape
            assert data.dtype == (np.float32 if single else np.float64)
            tol = 1e-6 if single else 1e-12  # float32 rounding of values of order 1
            assert np.abs(data - ref[name]).max() < tol, name
    h = read_header(path)
    assert (h["kind"], h["t"], h["step"], h["fields"]) == ("snapshot", 1.25, 7, names)


def test_xdmf_sidecar_follows_the_standard_and_points_at_real_datasets(make_case, tmp_path):
    sim = _sim(make_case, "boussinesq")
    path = write_snapshot(sim, str(tmp_path), single=True, stride=2)
    xmf = os.path.splitext(path)[0] + ".xmf"
    root = ET.parse(xmf).getroot()
    assert root.tag == "Xdmf" and root.get("Version") == "3.0"
    (grid,) = root.findall("./Domain/Grid")
    assert grid.get("GridType") == "Uniform"
    assert float(grid.find("Time").get("Value")) == sim.t
    topo = grid.find("Topology")
    assert topo.get("TopologyType") == "3DCoRectMesh"
    dims = tuple(int(n) for n in topo.get("Dimensions").split())
    geom = grid.find("Geometry")
    assert geom.get("GeometryType") == "ORIGIN_DXDYDZ"
    origin, spacing = ([float(v) for v in item.text.split()] for item in geom.findall("DataItem"))
    assert origin == [0.0, 0.0, 0.0]
    lx, ly, lz = sim.case.lengths
    assert spacing == pytest.approx([2 * lz / 8, 2 * ly / 16, 2 * lx / 16], rel=1e-15)
    seen = []
    for att in grid.findall("Attribute"):
        assert att.get("AttributeType") == "Scalar" and att.get("Center") == "Node"
        item = att.find("DataItem")
        assert item.get("Format") == "HDF"
        fname, dset = item.text.strip().split(":")
        with h5py.File(os.path.join(os.path.dirname(xmf), fname)) as fh:
            ds = fh[dset]
            assert ds.shape == dims == tuple(int(n) for n in item.get("Dimensions").split())
            assert ds.dtype.itemsize == int(item.get("Precision"))
        seen.append(att.get("Name"))
    assert seen == ["u", "v", "w", "T"]


def test_run_cadence_and_restart_continue_without_repeats(make_case, tmp_path):
    from shearmix.solver.compute.parallel import SerialComm
    from shearmix.solver.files.checkpoint import FOLDER, list_checkpoints
    from shearmix.solver.run.restart import apply, check
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8},
                     time={"t_end": None, "max_steps": 6, "adaptive": False, "dt": 0.1},
                     output={"snapshot_every": 0.2})
    sim = Simulation(case)
    assert sim.run(output=str(tmp_path), log=lambda m: None) == 0
    steps = lambda: sorted(int(n[5:14]) for n in os.listdir(tmp_path / "snapshots")
                           if n.endswith(".h5"))
    assert steps() == [0, 2, 4, 6]  # t = 0, 0.2, 0.4, 0.6
    (_, ckpt), = list_checkpoints(str(tmp_path / FOLDER))
    again = Simulation(case, initial=False)
    apply(again, ckpt, check(ckpt, case, SerialComm()))
    assert again.run(output=str(tmp_path), append=True, log=lambda m: None) == 0
    assert steps() == [0, 2, 4, 6, 8, 10, 12]
    # the collection of all of them, for playing the run as a time series
    root = ET.parse(tmp_path / "snapshots" / "snapshots.xmf").getroot()
    (series,) = root.findall("./Domain/Grid")
    assert (series.get("GridType"), series.get("CollectionType")) == ("Collection", "Temporal")
    grids = series.findall("Grid")
    times = [float(g.find("Time").get("Value")) for g in grids]
    assert times == pytest.approx([0.0, 0.2, 0.4, 0.6, 0.8, 1.0, 1.2], abs=1e-12)
    for g in grids:
        for item in g.findall("Attribute/DataItem"):
            fname, dset = item.text.strip().split(":")
            with h5py.File(tmp_path / "snapshots" / fname) as fh:
                assert fh[dset].shape == tuple(int(n) for n in item.get("Dimensions").split())


@pytest.mark.mpi
def test_stride_across_two_ranks(tmp_path, make_case):
    from test_mpi import _mpiexec
    import subprocess
    env = dict(os.environ, OMP_NUM_THREADS="1")
    env.pop("SHEARMIX_SERIAL", None)
    probe = os.path.join(os.path.dirname(__file__), "checkpoint_probe.py")
    res = subprocess.run([_mpiexec(), "-n", "2", sys.executable, probe, "snapshot",
                          str(tmp_path)], capture_output=True, text=True, timeout=300, env=env)
    assert res.returncode == 0, res.stderr[-2000:]
    (path,) = [p for p in tmp_path.iterdir() if p.suffix == ".h5"]
    case = make_case(parameters={"Re": 50.0, "BPe": 2.0}, grid={"Nx": 16, "Ny": 16, "Nz": 8})
    with h5py.File(path) as fh:
        assert fh.attrs["ranks"] == 2
        # stride 3 over x-slabs of 8 planes: rank 1 starts mid-stride, at plane 9
        ref = _analytic(case, *_points(case, (3, 6, 6), 3))
        for name in ("u", "v", "w", "b"):
            assert fh[name].shape == (3, 6, 6)
            assert np.abs(fh[name][()] - ref[name]).max() < 1e-12, name


def test_failing_snapshot_write_stops_the_run_with_code_5(make_case, tmp_path, monkeypatch):
    import errno

    from shearmix.solver.files import snapshots
    from shearmix.solver.files.checkpoint import list_checkpoints

    def quota(*args, **kwargs):
        raise OSError(errno.EDQUOT, os.strerror(errno.EDQUOT))
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, time={"t_end": None, "max_steps": 6},
                     output={"snapshot_every": 0.05})
    sim = Simulation(case)
    monkeypatch.setattr(snapshots, "write_xdmf", quota)
    lines = []
    assert sim.run(output=str(tmp_path), log=lines.append) == 5
    assert sim.step_count == 0
    assert any("snap_000000000.xmf: could not be written (Disk quota exceeded" in ln
               for ln in lines), lines
    assert list_checkpoints(str(tmp_path / "checkpoints")) == []  # nothing written after it


@pytest.mark.parametrize("model", ["lowpe", "boussinesq"])
@pytest.mark.parametrize("product_pass", ["whole", "blocks"])
def test_writing_outputs_leaves_the_run_unchanged(make_case, tmp_path, model, product_pass):
    """Outputs observe the state; they must not change it (common practice, no source).

    A snapshot transforms the state to the grid; the inverse FFT destroys its
    input, so a snapshot made in the tendency's own work arrays left garbage
    outside the 2/3 band that the next evaluation then transformed back in.
    """
    params = {"Re": 50.0, "BPe": 0.1} if model == "lowpe" else {"Re": 50.0, "B": 1.0, "Pe": 10.0}
    finals = []
    for every in (None, 0.05):
        # with every output on at once: snapshots, spectra and checkpoints
        case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 8, "Nz": 8},
                         time={"t_end": None, "max_steps": 6, "adaptive": False, "dt": 0.02},
                         initial={"kind": "laminar_noise", "amplitude": 0.1},
                         output={"snapshot_every": every, "spectra_every": every,
                                 "checkpoint_every": every},
                         compute={"product_pass": product_pass})
        sim = Simulation(case)
        assert sim.run(output=str(tmp_path / f"run-{every}"), log=lambda m: None) == 0
        finals.append(sim.state.copy())
    assert np.array_equal(finals[0], finals[1])
