"""Field snapshots: physical-space fields in HDF5, with an XDMF sidecar for visualisers.

``<run folder>/snapshots/snap_<step, 9 digits>.h5`` holds the common header
of :mod:`shearmix.solver.files.fileheader` plus ``stride`` and ``axes`` attributes and one
dataset per field, all of shape ``(nz, ny, nx)`` with
``n = ceil(N / stride)``:

``u, v, w``  velocity components along x (streamwise), y, z (vertical)
``T``        temperature perturbation (boussinesq)
``b``        low-Peclet buoyancy ``b = BPe lap^{-1} w`` (lowpe), in Fourier
             space ``b_k = BPe alpha p_k / |k|^2`` (``w_k = -alpha p_k``,
             :mod:`shearmix.solver.physics.basis`), zero at ``k = 0``

Element ``[k, j, i]`` is the value at ``x = i*stride*Lx/Nx``,
``y = j*stride*Ly/Ny``, ``z = k*stride*Lz/Nz`` (axes stored z, y, x so that
x varies fastest, the order XDMF describes). Precision float64, or float32
with ``output.snapshot_single``.

``snap_<step>.xmf`` beside it is an XDMF 3 file: one uniform grid,
``3DCoRectMesh`` topology with ``Dimensions="nz ny nx"``, ``ORIGIN_DXDYDZ``
geometry (values in the same z, y, x order) and one node-centred scalar
attribute per dataset, pointing at ``snap_<step>.h5:/<name>``.
``snapshots.xmf`` gathers the grids of all of them, in step order, in one
temporal collection, so that a visualiser plays the run as a time series.
"""
from __future__ import annotations

import os
import re
import xml.etree.ElementTree as ET

import numpy as np

from shearmix.solver.files.fileheader import common_attributes
from shearmix.solver.files.slabfile import WriteFailed, agree, prepare_folder, write_global
from shearmix.solver.physics.terms import quasi_static
from shearmix.solver.run.outputs import EveryTime, Output
from shearmix.solver.run.stepview import step_view

FOLDER = "snapshots"
COLLECTION = "snapshots.xmf"
_NAME = re.compile(r"^snap_(\d{9,})\.xmf$")


def snapshot_fields(model: str, tracers=()) -> tuple:
    """The fields a snapshot holds: velocity, ``T`` (or the low-Peclet ``b``), each
    tracer as ``c.NAME``."""
    base = ("u", "v", "w", "T") if model == "boussinesq" else ("u", "v", "w", "b")
    return base + tuple(tr.field for tr in tracers)


def strided_shape(shape, stride: int) -> tuple:
    """``(nz, ny, nx)`` of a snapshot of an ``(Nx, Ny, Nz)`` grid at ``stride``."""
    nx, ny, nz = (-(-n // stride) for n in shape)
    return (nz, ny, nx)


def buoyancy_spectral(view) -> np.ndarray:
    """``b_k = BPe alpha p_k / |k|^2`` on this rank's slab (zero at k = 0)."""
    return quasi_static(view.state[1], view.params.BPe, view.basis, view.grid)


def local_fields(view) -> dict:
    """This rank's physical x-slabs of the snapshot fields, by name."""
    tracers = tuple(tr.field for tr in view.case.tracers)
    u, v, w, T, *scalars = view.to_physical(view.state, tracers)
    out = {"u": u, "v": v, "w": w}
    out.update(zip(tracers, scalars))
    if T is not None:
        out["T"] = T
    else:
        out["b"] = view.inverse(buoyancy_spectral(view))
    return out


def _x_part(grid, stride: int):
    """Local x offsets kept at ``stride`` and where they go in the strided file."""
    first = (-grid.x_start) % stride
    local = np.arange(first, grid.nx_local, stride)
    start = (grid.x_start + first) // stride
    return local, start, start + len(local)


def write_snapshot(sim, directory: str, single: bool = False, stride: int = 1) -> str:
    """Write the physical fields of ``sim`` (a simulation or its
    :class:`shearmix.solver.run.stepview.StepView`) and the XDMF sidecar (collective);
    return the path."""
    sim = step_view(sim)
    g = sim.grid
    names = snapshot_fields(sim.case.model, sim.case.tracers)
    path = os.path.join(directory, f"snap_{sim.step_count:09d}.h5")
    shape = strided_shape(g.shape, stride)
    dtype = "<f4" if single else "<f8"
    # one set of values for all ranks (the mpio driver writes attributes collectively)
    attrs = sim.comm.bcast(common_attributes(sim, "snapshot", names))
    attrs.update(stride=int(stride), axes="z,y,x", precision="single" if single else "double")
    fields = local_fields(sim)  # collective transforms, before the rank-ordered writes
    xs, x0, x1 = _x_part(g, stride)

    def create(fh):
        for key, value in attrs.items():
            fh.attrs[key] = value
        for name in names:
            fh.create_dataset(name, shape=shape, dtype=dtype)

    def fill(fh):
        if x1 == x0:
            return
        for name in names:
            part = fields[name][xs][:, ::stride, ::stride]
            fh[name][:, :, x0:x1] = np.ascontiguousarray(part.transpose(2, 1, 0), dtype=dtype)

    def finish(fh):
        fh.attrs["complete"] = 1

    write_global(sim.comm, path, create, fill, finish)
    error = None
    if sim.comm.rank == 0:
        try:
            write_xdmf(path, attrs, names, shape, stride, g.lengths, g.shape, single)
            write_collection(directory)
        except OSError as exc:
            where = getattr(exc, "filename", None) or xdmf_path(path)
            error = f"{where}: could not be written ({exc.strerror or exc})"
    error = agree(sim.comm, error)
    if error:
        raise WriteFailed(error)
    return path


def xdmf_path(h5_path: str) -> str:
    return os.path.splitext(h5_path)[0] + ".xmf"


def write_xdmf(h5_path, attrs, names, shape, stride, lengths, grid_shape, single) -> str:
    """The XDMF sidecar of a snapshot (temporary name, then rename)."""
    nz, ny, nx = shape
    dims = f"{nz} {ny} {nx}"
    spacing = [lengths[i] / grid_shape[i] * stride for i in (2, 1, 0)]  # z, y, x order
    root = ET.Element("Xdmf", Version="3.0")
    domain = ET.SubElement(root, "Domain")
    grid = ET.SubElement(domain, "Grid", Name=f"step {attrs['step']}", GridType="Uniform")
    ET.SubElement(grid, "Time", Value=repr(float(attrs["t"])))
    ET.SubElement(grid, "Topology", TopologyType="3DCoRectMesh", Dimensions=dims)
    geom = ET.SubElement(grid, "Geometry", GeometryType="ORIGIN_DXDYDZ")
    for values in ((0.0, 0.0, 0.0), spacing):
        item = ET.SubElement(geom, "DataItem", Format="XML", NumberType="Float",
                             Precision="8", Dimensions="3")
        item.text = " ".join(repr(float(v)) for v in values)
    base = os.path.basename(h5_path)
    for name in names:
        att = ET.SubElement(grid, "Attribute", Name=name, AttributeType="Scalar", Center="Node")
        item = ET.SubElement(att, "DataItem", Format="HDF", NumberType="Float",
                             Precision="4" if single else "8", Dimensions=dims)
        item.text = f"{base}:/{name}"
    target = xdmf_path(h5_path)
    _write_xml(root, target, f"shearmix {attrs['version']} snapshot, t = {attrs['t']!r}")
    return target


def _write_xml(root, target, comment):
    ET.indent(root)
    tmp = os.path.join(os.path.dirname(target), "." + os.path.basename(target) + ".tmp")
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write('<?xml version="1.0" ?>\n')
        fh.write(f"<!-- {comment} -->\n")
        fh.write(ET.tostring(root, encoding="unicode"))
        fh.write("\n")
    os.replace(tmp, target)


def write_collection(directory: str) -> str:
    """``snapshots.xmf``: the grids of every ``snap_<step>.xmf`` in ``directory`` as one
    XDMF temporal collection (rewritten whole, temporary name then rename)."""
    root = ET.Element("Xdmf", Version="3.0")
    domain = ET.SubElement(root, "Domain")
    series = ET.SubElement(domain, "Grid", Name="snapshots", GridType="Collection",
                           CollectionType="Temporal")
    for name in sorted(n for n in os.listdir(directory) if _NAME.match(n)):
        try:
            grid = ET.parse(os.path.join(directory, name)).getroot().find("./Domain/Grid")
        except ET.ParseError:
            continue  # not ours to judge here; the visualiser would stumble on it alone
        if grid is not None:
            series.append(grid)
    target = os.path.join(directory, COLLECTION)
    _write_xml(root, target, "shearmix snapshots as a time series")
    return target


class SnapshotOutput(Output):
    """Snapshots every ``every`` of simulated time; the first at the start of a fresh run.

    A restarted run continues the cadence: its first snapshot is at the first
    multiple of ``every`` after the checkpoint's time.
    """

    def __init__(self, every: float, single: bool = False, stride: int = 1):
        self.cadence = EveryTime(every)
        self.single, self.stride = bool(single), int(stride)

    def open(self, sim, out_dir, append):
        super().open(sim, out_dir, append)
        self.directory = os.path.join(out_dir, FOLDER)

        def earlier_run(d):  # a new run replaces the folder's run and its snapshots
            return [os.path.join(d, n) for n in os.listdir(d)
                    if n.startswith("snap_") or n == COLLECTION]

        prepare_folder(sim.comm, self.directory, "snapshots", None if append else earlier_run)
        self.cadence.start(sim.t, now=not append)

    def due(self, sim):
        return self.cadence(sim)

    def write(self, sim):
        write_snapshot(sim, self.directory, self.single, self.stride)
        self.cadence.advance(sim.t)


def snapshot_outputs(case) -> list:
    """The snapshot output a case asks for (``output.snapshot_every``), or none."""
    every = case.get("output.snapshot_every")
    if not every:
        return []
    return [SnapshotOutput(every, case.get("output.snapshot_single"),
                           case.get("output.snapshot_stride"))]
