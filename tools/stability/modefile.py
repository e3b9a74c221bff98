"""An eigenmode as a perturbation file for the engine (``initial: {kind: eigenmode}``, or ``kind: file``).

File layout (read by ``shearmix.solver.physics.initial.read_perturbation``): HDF5 with float64
datasets ``u``, ``v``, ``w`` (and ``T`` for the boussinesq model) of shape
``(Nx, Ny, Nz)`` on the case grid, ``x_i = i Lx / Nx`` along axis 0 (likewise
``y``, ``z``), root attributes ``kind = "perturbation"``, ``version``,
``case`` (YAML text), the eigenvalue and the wavenumbers.

The field is the real part of the eigenmode

    u'(x) = Re[ exp(i kx x + i kz z) sum_n u_n exp(i q_n y) ],

evaluated exactly (sum of Fourier modes, no interpolation), with the phase
chosen so that the largest velocity coefficient is real and positive, and
scaled so that ``max |u'|`` over the grid is 1 (``T`` by the same factor).
Harmonics beyond the grid's dealiased band (2/3 rule, Orszag 1971) are left
out so that the engine keeps the field intact; the energy share left out is
recorded (``dropped_energy``).  Each kept harmonic satisfies ``k . u_n = 0``,
so the discrete field is divergence free to round-off.
"""
from __future__ import annotations

import math
import os

import numpy as np

from . import eigen
from .boxfit import Box, y_content
from .params import FlowParams

FORMAT_VERSION = 1


def program_version() -> str:
    try:
        from shearmix.solver.version import __version__
        return str(__version__)
    except Exception:  # the engine package may be absent in a bare tools install
        return "unknown"


def box_indices(box: Box, kx: float, kz: float, ky0: float, kf: float):
    """Integer wave indices ``(i, j, l)`` of a mode in the box, or raise ValueError if it does not fit."""
    out = []
    for name, k, L in (("kx", kx, box.Lx), ("kz", kz, box.Lz), ("ky0", ky0, box.Ly)):
        r = k * L / (2 * math.pi)
        if abs(r - round(r)) > 1e-8 * max(1.0, abs(r)):
            raise ValueError(f"{name}: {k:g} is not a multiple of 2 pi/L = {2 * math.pi / L:g}; "
                             f"the mode does not fit the box")
        out.append(int(round(r)))
    return tuple(out)


def mode_fields(params: FlowParams, box: Box, kx: float, kz: float, ky0: float = 0.0):
    """Physical fields of the eigenmode on the box grid and a metadata dict.

    Returns ``(fields, meta)`` with ``fields`` a dict of ``(Nx, Ny, Nz)`` arrays.
    """
    i, j, l = box_indices(box, kx, kz, ky0, params.kf)
    ci, cy, cj = box.cutoff
    if i > ci or j > cj:
        raise ValueError(f"mode: wave indices (i={i}, j={j}) lie beyond the grid's dealiased "
                         f"range (i <= {ci}, j <= {cj}); refine the grid")
    e = eigen.solve(params, kx, kz, ky0, vectors=True)
    op = e.operator
    u_n = op.velocity(e.vector)
    T_n = op.temperature(e.vector)
    share = y_content(op, e.vector)
    ny_index = np.rint(op.q * box.Ly / (2 * math.pi)).astype(int)
    kept = np.abs(ny_index) <= cy
    dropped = float(share[~kept].sum())
    # phase: largest velocity coefficient real and positive (reproducible files)
    flat = u_n.ravel()
    ph = flat[np.argmax(np.abs(flat))]
    ph = ph / abs(ph)
    u_n = u_n / ph
    T_n = T_n / ph if T_n is not None else None
    x = np.arange(box.Nx) * box.Lx / box.Nx
    y = np.arange(box.Ny) * box.Ly / box.Ny
    z = np.arange(box.Nz) * box.Lz / box.Nz
    ex = np.exp(1j * kx * x)[:, None, None]
    ez = np.exp(1j * kz * z)[None, None, :]
    ey = np.exp(1j * np.outer(op.q[kept], y))          # (harmonics, Ny)
    prof = {name: (u_n[kept, c] @ ey) for c, name in enumerate("uvw")}
    if T_n is not None:
        prof["T"] = T_n[kept] @ ey
    fields = {name: np.real(ex * p[None, :, None] * ez) for name, p in prof.items()}
    speed = np.sqrt(fields["u"] ** 2 + fields["v"] ** 2 + fields["w"] ** 2)
    scale = 1.0 / float(speed.max())
    for name in fields:
        fields[name] = np.ascontiguousarray(fields[name] * scale)
    meta = dict(sigma_real=e.sigma.real, sigma_imag=e.sigma.imag, growth_rate=e.sigma.real,
                frequency=abs(e.sigma.imag), kx=kx, kz=kz, ky0=ky0, index_x=i, index_z=j,
                index_y0=l, harmonics=e.M, truncation_change=e.change,
                dropped_energy=dropped, model=params.model, parameters=params.describe())
    return fields, meta


def write_mode_file(path: str, fields: dict, meta: dict, case_yaml: str, force: bool = False):
    """Write the perturbation file; refuses to replace an existing file unless ``force``."""
    import h5py
    if os.path.exists(path) and not force:
        raise FileExistsError(f"{path}: exists; pass --force to replace it")
    tmp = path + ".part"
    with h5py.File(tmp, "w") as fh:
        for name, arr in fields.items():
            fh.create_dataset(name, data=np.asarray(arr, dtype=np.float64))
        fh.attrs["kind"] = "perturbation"
        fh.attrs["version"] = program_version()
        fh.attrs["format_version"] = FORMAT_VERSION
        fh.attrs["created_by"] = "shearmix stability mode"
        fh.attrs["case"] = case_yaml
        fh.attrs["normalisation"] = "real part, max |u'| = 1 on the grid"
        for k, v in meta.items():
            fh.attrs[k] = v
    os.replace(tmp, path)
