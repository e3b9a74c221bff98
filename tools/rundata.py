"""A run folder as Python objects, for analysis in notebooks and scripts.

``open_run(folder)`` gives a :class:`Run`: its case, its time series by
segment (:mod:`shearmix.tools.analysis.segments`), spectra, snapshots and
checkpoint metadata as NumPy arrays with their meaning attached, and its
summary and power-law fits as dataclasses. Every file is read by the
program's own readers (``shearmix.solver.files.*``,
:mod:`shearmix.tools.analysis.summary`); quantities are in the case's
nondimensional units (docs/equations.md). See docs/api.md.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np
import yaml

__all__ = ["MEANINGS", "Series", "Spectra", "FileInfo", "Summary", "Run", "open_run",
           "fit_runs"]

#: What each time-series name means (the reported numbers of docs/equations.md).
MEANINGS = {
    "t": "time", "step": "time step number", "dt": "time step",
    "K": "kinetic energy <|u|^2>/2", "Kx": "kinetic energy of u", "Ky": "kinetic energy of v",
    "Kz": "kinetic energy of w", "I": "energy injection by the forcing",
    "eps": "viscous dissipation", "J": "buoyancy flux", "chi": "thermal dissipation",
    "eta": "mixing efficiency -J/(eps - J)", "u_rms": "rms of u", "v_rms": "rms of v",
    "w_rms": "rms of w", "T_rms": "rms of the temperature", "b_rms": "rms of the buoyancy",
    "umax": "largest |u| on the grid", "budget_residual": "residual of dK/dt = I - eps + J",
    "kmax_etaK": "kmax times the Kolmogorov scale", "Lz_turb": "vertical scale of the flow",
    "D_flux": "turbulent diffusivity -<wT>", "D_estimate": "diffusivity estimate",
    "Pe_turb": "turbulent Peclet number",
    "Kmean": "kinetic energy of the x-mean flow", "Kfluct": "kinetic energy of the fluctuations",
    "u_fluct_rms": "rms of u - <u>_x", "v_fluct_rms": "rms of v - <v>_x",
    "w_fluct_rms": "rms of w - <w>_x", "isotropy_fluct": "isotropy of the fluctuations",
    "K2d_laminar": "energy of the laminar modes", "K2d_pert": "energy of the other kz = 0 modes",
    "K3d": "energy of the kz != 0 modes", "Lz_jets": "vertical scale of the x-mean jets",
    "Ri_jets": "Richardson-Peclet number of the jets",
}


@dataclass(frozen=True)
class Series:
    """The records of one segment: ``data[name]`` an array per quantity
    (:data:`MEANINGS`), ``case`` the segment's case, ``changes`` what began it."""

    segment: int
    t_start: float
    case: dict
    changes: dict
    data: dict

    def __getitem__(self, name):
        if name not in self.data:
            raise KeyError(f"no series '{name}'; available: {', '.join(self.data)}")
        return self.data[name]

    @property
    def names(self):
        return tuple(self.data)


@dataclass(frozen=True)
class Spectra:
    """Energy spectra records (``spectra.h5``): ``t``, ``step``; per direction
    (``kx, ky, kz, shell``) ``wavenumbers[d]``, ``kinetic[d]`` of shape
    ``(records, 3 components u v w, bins)`` and ``thermal[d]`` of shape
    ``(records, bins)``; each bin holds its share of ``<f^2>/2``."""

    t: np.ndarray
    step: np.ndarray
    wavenumbers: dict
    kinetic: dict
    thermal: dict
    case: dict


@dataclass(frozen=True)
class FileInfo:
    """A checkpoint or snapshot: its path, ``t``, ``step``, grid, box lengths,
    fields, case and the run's history up to it (the file header)."""

    path: str
    t: float
    step: int
    grid: tuple
    lengths: tuple
    fields: list
    case: dict
    history: list


@dataclass(frozen=True)
class Summary:
    """A run's summary: ``values[q]`` the time mean, ``errors[q]`` its standard error
    (NaN when not defined), the regime label, warnings and the full row."""

    values: dict
    errors: dict
    regime: str
    warnings: list
    row: dict = field(repr=False)


def _info(header) -> FileInfo:
    return FileInfo(path=header["path"], t=float(header["t"]), step=int(header["step"]),
                    grid=tuple(header["grid"]), lengths=tuple(header["lengths"]),
                    fields=list(header["fields"]), case=yaml.safe_load(header["case"]) or {},
                    history=list(header["history"]))


class Run:
    """A run folder (see :func:`open_run`)."""

    def __init__(self, folder):
        from shearmix.tools.analysis.segments import split
        from shearmix.tools.analysis.summary import read_timeseries
        self.folder = os.fspath(folder)
        data, attrs, _ = read_timeseries(self.folder)
        self._data, self._segments = data, split(data, attrs)
        self.case = self._segments[-1].case

    @property
    def segments(self) -> list:
        """Every segment's :class:`Series`, in order."""
        return [self.series(k) for k in range(len(self._segments))]

    def series(self, segment=None) -> Series:
        """The time series of one segment (the last by default; negative from the end)."""
        from shearmix.tools.analysis.segments import choose
        seg = choose(self._segments, segment, self.folder)
        return Series(segment=seg.index, t_start=seg.t, case=seg.case, changes=dict(seg.changes),
                      data={k: v[seg.records] for k, v in self._data.items()})

    def spectra(self) -> Spectra:
        """The run's spectra (FileNotFoundError naming the file if it wrote none)."""
        from shearmix.solver.files.spectra import read_spectra
        sp = read_spectra(self.folder)
        return Spectra(t=sp["t"], step=sp["step"], wavenumbers=sp["wavenumbers"],
                       kinetic=sp["kinetic"], thermal=sp["thermal"],
                       case=yaml.safe_load(sp["attrs"]["case"]) or {})

    def _files(self, folder, kind) -> list:
        from shearmix.solver.files.fileheader import HeaderError, read_header
        where = os.path.join(self.folder, folder)
        out = []
        for name in sorted(os.listdir(where)) if os.path.isdir(where) else []:
            path = os.path.join(where, name)
            if not name.endswith(".h5"):
                continue
            try:
                header = read_header(path, kind)
            except HeaderError:
                continue  # incomplete or damaged: not part of the run's record
            out.append(_info({**header, "path": path}))
        return out

    def checkpoints(self) -> list:
        """:class:`FileInfo` of each complete checkpoint, oldest first (no fields read)."""
        from shearmix.solver.files.checkpoint import FOLDER
        return self._files(FOLDER, "checkpoint")

    def snapshots(self) -> list:
        """:class:`FileInfo` of each complete snapshot, oldest first."""
        from shearmix.solver.files.snapshots import FOLDER
        return self._files(FOLDER, "snapshot")

    def snapshot(self, which=-1) -> dict:
        """The fields of a snapshot (``which`` indexes :meth:`snapshots`) as arrays indexed
        ``[i, j, k]`` at ``x_i, y_j, z_k`` (the file stores them ``[k, j, i]``)."""
        import h5py
        snaps = self.snapshots()
        if not snaps:
            raise FileNotFoundError(f"{self.folder}: no complete snapshot (set output.snapshot_every)")
        info = snaps[which]
        with h5py.File(info.path, "r") as fh:
            return {name: fh[name][()].transpose(2, 1, 0) for name in info.fields}

    def summary(self, **options) -> Summary:
        """:func:`shearmix.tools.analysis.summary.summarize_run` of the folder as a
        :class:`Summary`; ``options`` are :class:`SummaryOptions` fields (e.g. ``segment=0``)."""
        from shearmix.tools.analysis.summary import averaged_names, summarize_run
        row = summarize_run(self.folder, **options)
        names = averaged_names(row)  # the flow's quantities, then each tracer's as q.NAME
        return Summary(values={q: row[q] for q in names}, errors={q: row[f"{q}_err"] for q in names},
                       regime=row["regime"], warnings=list(row["warnings"]), row=row)


def open_run(folder) -> Run:
    """Open a run folder (one holding ``timeseries.h5``)."""
    return Run(folder)


def fit_runs(runs, x="BPe", y="Lz_turb", confidence=0.95, **options):
    """Power law ``y = A x^p`` across runs (:func:`shearmix.tools.analysis.fits.fit_power_law`,
    weighted by the summaries' errors when all are usable): a ``PowerLawFit``. ``runs``
    holds run folders, :class:`Run` or :class:`Summary` objects; ``options`` go to
    :meth:`Run.summary`."""
    from shearmix.tools.analysis.fits import fit_power_law

    def row(r):
        if isinstance(r, Summary):
            return r.row
        return (r if isinstance(r, Run) else open_run(r)).summary(**options).row
    rows = [row(r) for r in runs]
    xs = np.array([r[x] for r in rows], dtype=float)
    ys = np.array([r[y] for r in rows], dtype=float)
    es = np.array([r.get(f"{y}_err", math.nan) for r in rows], dtype=float)
    usable = bool(np.all(np.isfinite(es) & (es > 0)))
    return fit_power_law(xs, ys, es if usable else None, confidence=confidence)
