"""Energy spectra written during a run: ``<run folder>/spectra.h5``.

Computed in spectral space from the state's normalised Fourier amplitudes
``f_k`` (``f(x) = sum_k f_k exp(i k.x)``). By Parseval's identity
``<f^2> = sum_k |f_k|^2``; on the stored half spectrum (``kz >= 0``) the modes
with ``nz > 0`` count twice (``grid.half_weight``). Each spectrum below is a
sum of ``w_k |f_k|^2 / 2`` over the modes that fall in a bin, so the bins of
any one spectrum add up to ``<f^2>/2`` exactly:

* 1D spectra in ``kx``, ``ky``, ``kz``: bin ``m = |n_x|`` (resp. ``|n_y|``,
  ``n_z``), wavenumber ``2 pi m / L``; the ``+-n`` modes share a bin;
* shell spectrum: bin ``m = round(|k| / dk)`` with ``dk = min_i 2 pi / L_i``
  (the smallest nonzero wavenumber of the box), wavenumber ``m dk``.

Kinetic spectra are kept per velocity component (``u, v, w``; the kinetic
energy is their sum, the horizontal spectrum in ``kz`` of ``Lz_turb``
(docs/equations.md#reported-numbers) the sum of the first two). The thermal spectrum is that of ``T``
(boussinesq) or of the buoyancy ``b = BPe lap^{-1} w`` (lowpe, since ``T``
itself needs ``Pe``), again as ``<f^2>/2``.

File layout (rank 0 writes, one record appended per call, flushed):

* ``t``, ``step``: shape ``(n,)``;
* ``wavenumbers/kx|ky|kz|shell``: bin wavenumbers;
* ``kinetic/kx|ky|kz|shell``: shape ``(n, 3, nbins)``, components u, v, w;
* ``thermal/kx|ky|kz|shell``: shape ``(n, nbins)``;
* root attributes ``case`` (YAML), ``version``, ``model``, ``convention``,
  ``thermal_field``, ``shell_width``, ``created``.

Records written twice after a restart (times that do not increase) are left
in the file; :func:`read_spectra` keeps the later write, as the time-series
reader does.
"""
from __future__ import annotations

import math
import os

import h5py
import numpy as np

from shearmix.solver.files.series import stamp_provenance
from shearmix.solver.physics.terms import quasi_static
from shearmix.solver.run.outputs import Output
from shearmix.solver.run.stepview import step_view

SPECTRA_FILE = "spectra.h5"
DIRECTIONS = ("kx", "ky", "kz", "shell")

__all__ = ["SPECTRA_FILE", "DIRECTIONS", "SpectralBins", "compute_spectra", "SpectraWriter", "spectra_outputs",
           "SpectraOutput", "read_spectra"]


class SpectralBins:
    """Bin index of every local mode for each direction, and the bin wavenumbers.

    The number of bins depends only on the global grid, so every rank's
    partial sums have the same length and can be added across ranks.
    """

    def __init__(self, grid):
        lx, ly, lz = grid.lengths
        nx, ny, nz = grid.shape
        shape = grid.spectral_shape
        self.dk = min(2 * math.pi / L for L in grid.lengths)
        kk = np.sqrt(grid.k2)
        # largest |k| on the full (undealiased) grid: corner of the index box
        k_corner = math.sqrt(sum((n // 2 * 2 * math.pi / L) ** 2
                                 for n, L in zip(grid.shape, grid.lengths)))
        self.nbins = {"kx": nx // 2 + 1, "ky": ny // 2 + 1, "kz": nz // 2 + 1,
                      "shell": int(round(k_corner / self.dk)) + 1}
        self.index = {
            "kx": np.broadcast_to(np.abs(grid.nx_index), shape).ravel(),
            "ky": np.broadcast_to(np.abs(grid.ny_index), shape).ravel(),
            "kz": np.broadcast_to(grid.nz_index, shape).ravel(),
            "shell": np.rint(kk / self.dk).astype(np.int64).ravel(),
        }
        self.wavenumbers = {
            "kx": 2 * math.pi / lx * np.arange(self.nbins["kx"]),
            "ky": 2 * math.pi / ly * np.arange(self.nbins["ky"]),
            "kz": 2 * math.pi / lz * np.arange(self.nbins["kz"]),
            "shell": self.dk * np.arange(self.nbins["shell"]),
        }
        self.weight = np.broadcast_to(grid.half_weight, shape).ravel()

    def bin(self, power, direction):
        """Local per-bin sums of ``half_weight * power`` (``power`` on the local slab)."""
        return np.bincount(self.index[direction], weights=self.weight * power.ravel(),
                           minlength=self.nbins[direction])


def thermal_amplitudes(view):
    """Fourier amplitudes of the thermal field: ``T`` or ``b = BPe lap^{-1} w``."""
    if "T" in view.fields:
        return view.state[2], "T"
    return quasi_static(view.state[1], view.params.BPe, view.basis, view.grid), \
        "b = BPe lap^-1 w"


def compute_spectra(sim, bins=None):
    """All spectra of a step boundary (a simulation or its
    :class:`shearmix.solver.run.stepview.StepView`), summed over ranks (collective call).

    Returns
    -------
    dict
        ``kinetic``: direction -> array ``(3, nbins)``; ``thermal``:
        direction -> array ``(nbins,)``; ``thermal_field``: its name.
    """
    sim = step_view(sim)
    bins = bins or SpectralBins(sim.grid)
    a, p = sim.state[0], sim.state[1]
    comp = np.empty(sim.grid.spectral_shape, complex)
    kinetic = {d: np.zeros((3, bins.nbins[d])) for d in DIRECTIONS}
    for i in range(3):
        sim.basis.to_cartesian(a, p, i, comp)
        power = 0.5 * (comp.real ** 2 + comp.imag ** 2)
        for d in DIRECTIONS:
            kinetic[d][i] = bins.bin(power, d)
    theta, name = thermal_amplitudes(sim)
    power = 0.5 * (theta.real ** 2 + theta.imag ** 2)
    thermal = {d: bins.bin(power, d) for d in DIRECTIONS}
    tracers = sim.case.tracers
    scalar = {}
    for tr in tracers:
        c = sim.state[sim.fields.index(tr.field)]
        power = 0.5 * (c.real ** 2 + c.imag ** 2)
        scalar[tr.name] = {d: bins.bin(power, d) for d in DIRECTIONS}
    # one reduction for everything: pack, sum over ranks, unpack
    parts = [kinetic[d].ravel() for d in DIRECTIONS] + [thermal[d] for d in DIRECTIONS]
    parts += [scalar[tr.name][d] for tr in tracers for d in DIRECTIONS]
    total = sim.comm.sum(np.concatenate(parts))
    out_k, out_t, pos = {}, {}, 0
    for d in DIRECTIONS:
        n = 3 * bins.nbins[d]
        out_k[d] = total[pos:pos + n].reshape(3, -1)
        pos += n
    for d in DIRECTIONS:
        n = bins.nbins[d]
        out_t[d] = total[pos:pos + n]
        pos += n
    out_c = {}
    for tr in tracers:
        out_c[tr.name] = {}
        for d in DIRECTIONS:
            n = bins.nbins[d]
            out_c[tr.name][d] = total[pos:pos + n]
            pos += n
    return {"kinetic": out_k, "thermal": out_t, "thermal_field": name, "tracers": out_c}


class SpectraWriter:
    """Append spectra records to ``spectra.h5`` (call on rank 0 only)."""

    def __init__(self, path, case, bins, thermal_field, append=False):
        self.path = path
        self.fh = h5py.File(path, "a" if append else "w")
        attrs = self.fh.attrs
        if not append or "version" not in attrs:
            stamp_provenance(attrs, case, thermal_field=thermal_field, shell_width=bins.dk)
        for name in ("t", "step"):
            if name not in self.fh:
                self.fh.create_dataset(name, shape=(0,), maxshape=(None,), dtype="f8", chunks=(256,))
        for d in DIRECTIONS:
            n = bins.nbins[d]
            if f"wavenumbers/{d}" not in self.fh:
                self.fh.create_dataset(f"wavenumbers/{d}", data=bins.wavenumbers[d])
            if f"kinetic/{d}" not in self.fh:
                self.fh.create_dataset(f"kinetic/{d}", shape=(0, 3, n), maxshape=(None, 3, n),
                                       dtype="f8", chunks=(16, 3, n))
                self.fh.create_dataset(f"thermal/{d}", shape=(0, n), maxshape=(None, n),
                                       dtype="f8", chunks=(16, n))
        have = self.fh["t"].shape[0]
        for tr in case.tracers:
            for d in DIRECTIONS:
                n = bins.nbins[d]
                if f"tracers/{tr.name}/{d}" not in self.fh:
                    # new at a restart: NaN for the records before it
                    self.fh.create_dataset(f"tracers/{tr.name}/{d}",
                                           data=np.full((have, n), np.nan),
                                           maxshape=(None, n), dtype="f8", chunks=(16, n))

    def append(self, t, step, spectra):
        n = self.fh["t"].shape[0]
        for name, value in (("t", t), ("step", step)):
            self.fh[name].resize((n + 1,))
            self.fh[name][n] = value
        for d in DIRECTIONS:
            for group in ("kinetic", "thermal"):
                ds = self.fh[f"{group}/{d}"]
                ds.resize((n + 1,) + ds.shape[1:])
                ds[n] = spectra[group][d]
        # every tracer on file, one removed at a restart as NaN
        for name in self.fh.get("tracers", {}):
            for d in DIRECTIONS:
                ds = self.fh[f"tracers/{name}/{d}"]
                ds.resize((n + 1,) + ds.shape[1:])
                ds[n] = spectra["tracers"].get(name, {}).get(d, np.nan)
        self.fh.flush()

    def close(self):
        if self.fh:
            self.fh.close()
            self.fh = None


class SpectraOutput(Output):
    """Spectra every ``every`` units of simulated time (case key ``output.spectra_every``).

    A record is written at the first step at or after each multiple of
    ``every`` (the adaptive step does not land on them exactly); the first
    call of a run writes one.
    """

    def __init__(self, every: float):
        self.every = float(every)
        self.writer = None
        self.next_t = None

    def open(self, sim, out_dir, append):
        super().open(sim, out_dir, append)
        self.bins = SpectralBins(sim.grid)
        self.next_t = None
        if sim.comm.rank == 0:
            _, name = thermal_amplitudes(sim)
            self.writer = SpectraWriter(os.path.join(out_dir, SPECTRA_FILE), sim.case,
                                        self.bins, name, append=append)

    def due(self, sim):
        # tolerance: a step that lands a rounding error short of a multiple counts
        return self.next_t is None or sim.t >= self.next_t - 1e-9 * max(1.0, abs(sim.t))

    def write(self, sim):
        spectra = compute_spectra(sim, self.bins)
        if self.writer is not None:
            self.writer.append(sim.t, sim.step_count, spectra)
        self.next_t = (math.floor(sim.t / self.every + 1e-9) + 1) * self.every

    def close(self, sim, reason):
        if self.writer is not None:
            self.writer.close()
            self.writer = None


def read_spectra(path):
    """Read a run's spectra.

    Parameters
    ----------
    path : str
        Run folder (holding ``spectra.h5``) or the file itself.

    Returns
    -------
    dict
        ``t``, ``step`` (records with strictly increasing ``t``; for repeated
        times after a restart the later write is kept), ``wavenumbers``,
        ``kinetic``, ``thermal`` (dicts by direction) and ``attrs``.
    """
    path = os.fspath(path)
    fname = os.path.join(path, SPECTRA_FILE) if os.path.isdir(path) else path
    if not os.path.isfile(fname):
        raise FileNotFoundError(f"{fname}: no spectra file (set output.spectra_every in the case)")
    with h5py.File(fname, "r") as fh:
        if "t" not in fh or "kinetic" not in fh:
            raise ValueError(f"{fname}: not a spectra file (no 't' or 'kinetic')")
        t = fh["t"][()]
        later_min = np.minimum.accumulate(np.r_[t[1:], np.inf][::-1])[::-1]
        keep = t < later_min
        out = {"t": t[keep], "step": fh["step"][()][keep],
               "wavenumbers": {d: fh[f"wavenumbers/{d}"][()] for d in DIRECTIONS},
               "kinetic": {d: fh[f"kinetic/{d}"][()][keep] for d in DIRECTIONS},
               "thermal": {d: fh[f"thermal/{d}"][()][keep] for d in DIRECTIONS},
               "tracers": {name: {d: fh[f"tracers/{name}/{d}"][()][keep] for d in DIRECTIONS}
                           for name in fh.get("tracers", {})},
               "attrs": {k: (v.decode() if isinstance(v, bytes) else v)
                         for k, v in fh.attrs.items()}}
    return out


def spectra_outputs(case) -> list:
    """The spectra output a case asks for: one :class:`SpectraOutput`, or none."""
    every = case.get("output.spectra_every")
    return [SpectraOutput(every)] if every else []
