"""Initial states: laminar flow, seeded noise, rest, a single mode, a perturbation file.

Noise is band limited (integer wave indices ``|n| <= initial.noise_modes`` in
each direction) and drawn on a small global block of modes that every rank
builds from the same seed, so the field does not depend on the rank count.

Perturbation file (written by ``shearmix stability mode`` or by hand): HDF5
with float64 datasets ``u``, ``v``, ``w`` (and ``T`` for the boussinesq model)
of shape ``(Nx, Ny, Nz)`` on the case grid, x along the first axis, points at
``x_i = i Lx/Nx`` etc.; root attribute ``kind = "perturbation"``. The run
starts from the laminar flow plus ``initial.amplitude`` times these fields
(the velocity is projected onto its divergence-free part). Each rank reads
only its own x-slab.

Passive tracers (docs/equations.md#tracers) start from zero, a single mode
``amplitude cos(k.x)`` or the dataset ``c`` of an HDF5 file laid out as above,
each by its own ``tracers.NAME.initial`` keys.
"""
from __future__ import annotations

import numpy as np


class InitialStateError(ValueError):
    """A perturbation file that cannot be used; the message is one line."""


def laminar_physical(sim):
    """``U_L sin(kf y)`` on the local slab (streamwise velocity of the laminar flow)."""
    _, y, _ = sim.grid.physical_coordinates()
    return np.broadcast_to(sim.case.U_L * np.sin(sim.case.kf * y), sim.grid.physical_shape)


def noise_block(shape, m: int, seed: int, stream: int):
    """Hermitian-symmetric random coefficients on the block ``|nx|,|ny| <= m``, ``0 <= nz <= m``.

    Returns an array indexed ``[nx + m, ny + m, nz]``; the mean is zero.
    """
    rng = np.random.default_rng([seed, stream])
    size = (2 * m + 1, 2 * m + 1, m + 1)
    block = rng.standard_normal(size) + 1j * rng.standard_normal(size)
    # real field: f(-n) = conj f(n) on the nz = 0 plane
    plane = block[:, :, 0]
    block[:, :, 0] = 0.5 * (plane + np.conj(plane[::-1, ::-1]))
    block[m, m, 0] = 0.0
    return block


def scatter_block(grid, block, m: int, out: np.ndarray | None = None) -> np.ndarray:
    """Place a global mode block into this rank's spectral slab (zero elsewhere)."""
    if out is None:
        out = np.zeros(grid.spectral_shape, dtype=complex)
    else:
        out[...] = 0
    nx, ny, _ = grid.shape
    for iy in range(grid.ny_local):
        n_y = int(grid.ny_index[0, iy, 0])
        if abs(n_y) > m:
            continue
        for n_x in range(-m, m + 1):
            out[n_x % nx, iy, :m + 1] = block[n_x + m, n_y + m, :]
    return out


def apply_initial(sim, work) -> None:
    """Set ``sim``'s state from its case's ``initial`` section.

    ``work``: five spectral slabs the caller lends as scratch (their contents are
    overwritten), so that the noise needs no full-size temporaries.
    """
    case = sim.case
    kind = case.get("initial.kind")
    amp = float(case.get("initial.amplitude"))
    g = sim.grid
    if kind == "eigenmode":  # a perturbation file made by the stability tool
        kind = "file"
    u = laminar_physical(sim) if kind in ("laminar_noise", "laminar", "mode", "file") else None
    if kind == "mode":
        sim.set_physical(u, None, None, None)
        sim.add_mode(case.get("initial.mode.nx"), case.get("initial.mode.ny"),
                     case.get("initial.mode.nz"), case.get("initial.mode.component"), amp)
        return
    if kind == "file":
        pert = read_perturbation(case.get("initial.path"), g, "T" in sim.fields)
        sim.set_physical(u + amp * pert["u"], amp * pert["v"], amp * pert["w"],
                         amp * pert["T"] if "T" in sim.fields else None)
        return
    sim.set_physical(u, None, None, None)
    if kind != "laminar_noise" or amp == 0:
        return
    m = min(int(case.get("initial.noise_modes")), *g.cutoff)
    seed = int(case.get("initial.seed"))
    if "T" in sim.fields:
        T = scatter_block(g, noise_block(g.shape, m, seed, 3), m, out=work[0])
        rms = np.sqrt(sim.comm.sum(g.volume_sum(np.abs(T) ** 2)))
        sim.state[2] += T * (amp / rms)
    else:
        comps = [scatter_block(g, noise_block(g.shape, m, seed, s), m, out=work[s])
                 for s in range(3)]
        a, p = work[3], work[4]
        sim.basis.project(*comps, a, p)
        a *= sim.basis.nonzero
        p *= sim.basis.nonzero
        rms = np.sqrt(sim.comm.sum(g.volume_sum(np.abs(a) ** 2 + np.abs(p) ** 2)))
        sim.state[0] += a * (amp / rms)
        sim.state[1] += p * (amp / rms)


def read_perturbation(path: str, grid, need_T: bool) -> dict:
    """Read this rank's x-slab of a perturbation file, checking it first."""
    import h5py
    try:
        fh = h5py.File(path, "r")
    except (OSError, FileNotFoundError) as exc:
        raise InitialStateError(f"{path}: cannot open perturbation file ({exc})") from None
    with fh:
        names = ["u", "v", "w"] + (["T"] if need_T else [])
        out = {}
        for name in names:
            if name not in fh:
                raise InitialStateError(f"{path}: perturbation file has no dataset '{name}' "
                                        f"(needs {', '.join(names)})")
            ds = fh[name]
            if tuple(ds.shape) != grid.shape:
                raise InitialStateError(f"{path}: dataset '{name}' has shape {tuple(ds.shape)}, "
                                        f"the case grid is {grid.shape}")
            out[name] = np.asarray(ds[grid.x_start:grid.x_start + grid.nx_local], dtype=float)
    return out


def apply_tracer_initial(sim, tracer) -> None:
    """Set the tracer's field of ``sim``'s state from ``tracer.initial``
    (a :class:`shearmix.solver.case.Tracer`)."""
    ini, g = tracer.initial, sim.grid
    i = sim.fields.index(tracer.field)
    if ini["kind"] == "zero":
        sim.state[i] = 0
        return
    amp = float(ini["amplitude"])
    if ini["kind"] == "mode":
        x, y, z = g.physical_coordinates()
        k = [2 * np.pi / L * n for L, n in zip(g.lengths, (ini["nx"], ini["ny"], ini["nz"]))]
        field = amp * np.cos(k[0] * x + k[1] * y + k[2] * z) * np.ones(g.physical_shape)
    else:
        field = amp * read_field(ini["path"], g, "c")
    sim.set_scalar_physical(tracer.field, field)


def read_field(path: str, grid, name: str) -> np.ndarray:
    """This rank's x-slab of the physical dataset ``name`` of an HDF5 file on ``grid``."""
    import h5py
    try:
        fh = h5py.File(path, "r")
    except (OSError, FileNotFoundError) as exc:
        raise InitialStateError(f"{path}: cannot open field file ({exc})") from None
    with fh:
        if name not in fh:
            raise InitialStateError(f"{path}: no dataset '{name}'")
        ds = fh[name]
        if tuple(ds.shape) != grid.shape:
            raise InitialStateError(f"{path}: dataset '{name}' has shape {tuple(ds.shape)}, "
                                    f"the case grid is {grid.shape}")
        return np.asarray(ds[grid.x_start:grid.x_start + grid.nx_local], dtype=float)
