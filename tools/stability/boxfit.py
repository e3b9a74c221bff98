"""Which unstable modes fit a case's box, the fastest of them, and a resolution hint.

A mode fits the periodic box ``Lx x Ly x Lz`` when ``kx = 2 pi i / Lx``,
``kz = 2 pi j / Lz`` and ``ky0 = 2 pi l / Ly`` (the laminar flow's period
``2 pi / kf`` divides ``Ly``, so ``l`` runs over ``0 .. kf Ly / (4 pi)``;
``ky0`` and ``-ky0`` give the same spectrum by the symmetry ``y -> -y``).

Modes with ``kx = 0`` are skipped: without x-variation ``(v, w, T)`` obey the
shear-free equations, which only decay, and ``u`` is slaved to them (exact
property of the linearised equations).  Modes are also skipped where the
energy method bound (Serrin 1959; Joseph 1976)
``growth <= U_L kf / 2 - min(1/Re, 1/Pe)(kx^2 + kz^2)`` is negative, and where
the wave index lies beyond the grid's dealiased range (2/3 rule, Orszag
1971), since the grid cannot hold them.

The resolution hint (linear phase only): the y-harmonics of the fastest box
mode's eigenfunction whose share of the mode's energy is above ``tail``
must lie inside the dealiased range, i.e. ``Ny >= 3 * n_y_max + 1``;
likewise ``Nx >= 3 i + 1``, ``Nz >= 3 j + 1``.  The turbulent phase needs
more (see the ``kmax * eta_K`` check of the run diagnostics).
"""
from __future__ import annotations

import dataclasses
import math

import numpy as np

from . import eigen, maps
from .params import FlowParams

TAIL = 1e-8     # energy share of the eigenfunction allowed beyond the grid's resolved band
WARN_FRACTION = 0.9


@dataclasses.dataclass
class Box:
    """Box lengths, grid and forcing wavenumber (taken from a case)."""

    Lx: float
    Ly: float
    Lz: float
    Nx: int
    Ny: int
    Nz: int

    @classmethod
    def from_case(cls, case):
        return cls(case.Lx, case.Ly, case.Lz, case.Nx, case.Ny, case.Nz)

    @property
    def cutoff(self):
        """Largest kept wave index per direction under the 2/3 rule (Orszag 1971)."""
        return tuple((n - 1) // 3 for n in (self.Nx, self.Ny, self.Nz))


@dataclasses.dataclass
class BoxMode(maps.Eigenvalue):
    i: int
    j: int
    l: int
    kx: float
    kz: float
    ky0: float
    sigma: complex
    M: int
    converged: bool
    change: float


@dataclasses.dataclass
class BoxReport:
    params: FlowParams
    box: Box
    modes: list
    skipped: dict
    fastest_box: BoxMode | None
    fastest_free: maps.Optimum | None
    warnings: list
    hint: dict | None

    @property
    def unstable(self):
        return sorted([m for m in self.modes if m.growth > 0], key=lambda m: -m.growth)


def detunings(params: FlowParams, Ly: float):
    """``[(l, ky0)]`` for the Bloch detunings allowed by ``Ly`` (``0 <= ky0 <= kf/2``)."""
    ratio = params.kf * Ly / (2 * math.pi)
    m = int(round(ratio))
    if m < 1 or abs(ratio - m) > 1e-9 * max(1.0, ratio):
        raise ValueError(f"box.Ly: kf*Ly/(2 pi) must be a whole number, got {ratio:g}")
    return [(l, 2 * math.pi * l / Ly) for l in range(0, m // 2 + 1)]


def energy_bound(params: FlowParams, kx: float, kz: float) -> float:
    """Upper bound on the growth rate from the energy method (see module docstring)."""
    diff = params.nu if params.model == "lowpe" else min(params.nu, params.kappa)
    return 0.5 * params.U_L * params.kf - diff * (kx * kx + kz * kz)


def fastest_free_mode(params: FlowParams, kx_max=None, kz_max=None, n=12):
    """Fastest mode of the unbounded domain: a coarse (kx, kz) scan then a refinement
    over ``(kx, kz, ky0)`` (see :func:`maps.most_unstable`).  ``None`` when nothing grows."""
    kf = params.kf
    diff = params.nu if params.model == "lowpe" else min(params.nu, params.kappa)
    radius = math.sqrt(0.5 * params.U_L * kf / diff) if diff > 0 else 4 * kf
    kx_max = kx_max or min(1.5 * kf, radius)
    kz_max = kz_max or min(8 * kf, radius)
    kx = np.linspace(kx_max / n, kx_max, n)
    kz = np.linspace(0.0, kz_max, n)
    gm = maps.growth_map(params, kx, kz)
    i, j = gm.argmax()
    if gm.growth[i, j] <= 0:
        return None
    return maps.most_unstable(params, (kx[0] * 0.5, kx_max), (0.0, kz_max),
                              start=(kx[i], kz[j]), ky0_free=True)


def scan(params: FlowParams, box: Box, max_modes: int = 4000, free: bool = True) -> BoxReport:
    """Leading eigenvalue of every candidate box mode; fastest mode; warnings; resolution hint."""
    warnings = []
    kf = params.kf
    dets = detunings(params, box.Ly)
    ci, cy, cj = box.cutoff
    dkx, dkz = 2 * math.pi / box.Lx, 2 * math.pi / box.Lz
    if box.Lx <= 2 * math.pi / kf * (1 + 1e-12):
        warnings.append(f"box.Lx = {box.Lx:g} <= 2 pi/kf = {2 * math.pi / kf:g}: the box holds no "
                        "streamwise wavenumber below kf, where the 2D shear instability lives "
                        "(Meshalkin & Sinai 1961); 4 pi/kf is the usual choice")
    candidates = []
    skipped = {"energy_bound": 0, "grid": 0}
    i = 1
    while True:
        kx = i * dkx
        if energy_bound(params, kx, 0.0) <= 0:
            break
        if i > ci:
            skipped["grid"] += 1
            i += 1
            if i > 4 * max(ci, 1) + 64:
                break
            continue
        j = 0
        while True:
            kz = j * dkz
            if energy_bound(params, kx, kz) <= 0:
                break
            if j > cj:
                skipped["grid"] += 1
            else:
                for l, ky0 in dets:
                    candidates.append((i, j, l, kx, kz, ky0))
            j += 1
            if j > 4 * max(cj, 1) + 64:
                break
        i += 1
    if len(candidates) > max_modes:
        raise ValueError(f"max_modes: the box has {len(candidates)} candidate modes, more than "
                         f"the limit {max_modes}; raise the limit or use a coarser question (map)")
    modes = []
    M = eigen.M_START
    for (i, j, l, kx, kz, ky0) in candidates:
        e = eigen.solve(params, kx, kz, ky0, M_start=max(eigen.M_START, M // 2))
        M = e.M
        modes.append(BoxMode(i, j, l, kx, kz, ky0, e.sigma, e.M, e.converged, e.change))
    unstable = sorted([m for m in modes if m.growth > 0], key=lambda m: -m.growth)
    fastest_box = unstable[0] if unstable else None
    fastest_free = fastest_free_mode(params) if free else None
    if fastest_free is not None:
        if fastest_box is None:
            warnings.append(
                f"no unstable mode fits the box, although the unbounded flow is unstable "
                f"(fastest: kx={fastest_free.kx:.4g}, kz={fastest_free.kz:.4g}, "
                f"ky0={fastest_free.ky0:.4g}, growth {fastest_free.growth:.4g}, wavelength "
                f"{2 * math.pi / fastest_free.kx:.4g} in x)")
        elif fastest_box.growth < WARN_FRACTION * fastest_free.growth:
            warnings.append(
                f"the fastest mode of the unbounded flow does not fit the box: it grows at "
                f"{fastest_free.growth:.4g} (kx={fastest_free.kx:.4g}, kz={fastest_free.kz:.4g}, "
                f"ky0={fastest_free.ky0:.4g}), the fastest box mode at {fastest_box.growth:.4g}")
    if skipped["grid"]:
        pot = [c for c in _beyond_grid(params, box, dets)]
        if pot:
            warnings.append(f"{len(pot)} box wavenumbers that may be unstable lie beyond the "
                            f"grid's dealiased range (not computed); e.g. i={pot[0][0]}, "
                            f"j={pot[0][1]}")
    hint = resolution_hint(params, box, fastest_box) if fastest_box else None
    if hint and not hint["sufficient"]:
        warnings.append(f"grid {box.Nx}x{box.Ny}x{box.Nz} is too coarse for the fastest box mode: "
                        f"needs at least {hint['Nx']}x{hint['Ny']}x{hint['Nz']}")
    return BoxReport(params, box, modes, skipped, fastest_box, fastest_free, warnings, hint)


def _beyond_grid(params, box, dets):
    ci, _, cj = box.cutoff
    dkx, dkz = 2 * math.pi / box.Lx, 2 * math.pi / box.Lz
    out = []
    for i in range(1, ci + 64):
        for j in range(0, cj + 64):
            if (i > ci or j > cj) and energy_bound(params, i * dkx, j * dkz) > 0:
                out.append((i, j))
    return out


def _even_at_least(n):
    n = max(4, int(n))
    return n + (n % 2)


def y_content(op, vec):
    """Energy share of each y-harmonic of an eigenvector: ``|u_n|^2 (+ |T_n|^2)`` normalised."""
    u = op.velocity(vec)
    e = np.sum(np.abs(u) ** 2, axis=1)
    T = op.temperature(vec)
    if T is not None:
        # buoyancy-weighted potential energy makes u and T commensurable
        e = e + (op.params.B or 0.0) * np.abs(T) ** 2
    return e / e.sum()


def resolution_hint(params: FlowParams, box: Box, mode: BoxMode, tail: float = TAIL) -> dict:
    """Grid needed to hold ``mode`` in its linear phase (see module docstring)."""
    e = eigen.solve(params, mode.kx, mode.kz, mode.ky0, vectors=True)
    op = e.operator
    share = y_content(op, e.vector)
    order = np.argsort(np.abs(op.q))
    cum = np.cumsum(share[order])
    needed = order[: int(np.searchsorted(cum, 1 - tail)) + 1]
    ny_max = int(round(np.max(np.abs(op.q[needed])) * box.Ly / (2 * math.pi)))
    hint = dict(Nx=_even_at_least(3 * mode.i + 1), Ny=_even_at_least(3 * ny_max + 1),
                Nz=_even_at_least(3 * mode.j + 1), ny_max=ny_max, tail=tail)
    hint["sufficient"] = (box.Nx >= hint["Nx"] and box.Ny >= hint["Ny"] and box.Nz >= hint["Nz"])
    return hint
