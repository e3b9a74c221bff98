"""The velocity split into the streamwise-mean jets and the eddies about them, and
into two- and three-dimensional modes (docs/equations.md#jet-diagnostics).

* The ``x``-mean flow ``U(y, z) = <u>_x`` lives on the modes ``kx = 0``; the
  fluctuations ``u' = u - U`` on ``kx != 0``. ``Kmean + Kfluct = K`` exactly.
* Two-dimensional modes have ``kz = 0``. Their energy ``K2d`` splits into the
  laminar part ``K2d_laminar`` (the ``u`` component on the forced modes
  ``(0, +-kf, 0)``, where the laminar flow ``u_L = Re F0/kf^2 sin(kf y)`` lives)
  and the rest ``K2d_pert``; ``K3d = K - K2d``.
* ``Lz_jets = 2 pi sum_kz E_U(kz) / sum_kz kz E_U(kz)`` over ``kz > 0``, with
  ``E_U(kz)`` the energy of the ``x`` component of ``U`` at vertical
  wavenumber ``kz``: the vertical wavelength of the layered jets.
* ``Ri_jets = BPe l^2 / S`` with ``l = Lz_jets/(2 pi)`` and the rms vertical shear
  ``S^2 = <(dU/dz)^2 + (dV/dz)^2>``: the product of the Richardson number
  ``N^2/S^2`` and the Peclet number ``S l^2/kappa`` of the layers, the
  stability parameter of shear at low Peclet number (Zahn 1992, A&A 265, 115,
  from memory; in these units ``N^2/kappa = B Pe = BPe``).
"""
from __future__ import annotations

import math

import numpy as np

from shearmix.solver.physics.basis import vectors

#: the split's series keys, in order
FLOW_SPLIT_NAMES = ("Kmean", "Kfluct", "u_fluct_rms", "v_fluct_rms", "w_fluct_rms",
                    "isotropy_fluct", "K2d_laminar", "K2d_pert", "K3d", "Lz_jets", "Ri_jets")


def flow_split(view, K: float, components: tuple) -> dict:
    """The split numbers of the module docstring (collective call).

    ``K``: the total kinetic energy; ``components``: ``(Kx, Ky, Kz)``, the total
    energy of each Cartesian component, both already summed over ranks. Only the
    planes ``kx = 0`` and ``kz = 0`` are visited, so the cost is that of two planes.
    """
    g, y = view.grid, view.state
    a0, p0 = y[0][0], y[1][0]  # kx = 0 is the first plane on every rank
    e1, e2 = vectors(0.0, g.ky[0], g.kz[0])  # (ny_local, nzc, 3)
    mean = a0[..., None] * e1 + p0[..., None] * e2  # Cartesian U on the plane
    e = 0.5 * (mean * mean.conj()).real
    weight = g.half_weight[0]
    kz2 = g.kz[0] ** 2
    sums = [g.volume_sum(e[..., i]) for i in range(3)]
    sums += [g.volume_sum(kz2 * (e[..., 0] + e[..., 1]))]  # <(dU/dz)^2 + (dV/dz)^2>/2
    a2, p2 = y[0][:, :, 0], y[1][:, :, 0]  # the frame is orthonormal: energy (|a|^2+|p|^2)/2
    k2d = 0.5 * float(((a2 * a2.conj()).real + (p2 * p2.conj()).real).sum())
    laminar = sum(e[idx[1], idx[2], 0] for idx, _, _ in view.forcing)  # kz = 0: weight 1
    e_jets = (weight * e[..., 0]).sum(axis=0)  # U's x component per kz, this rank's ky
    tot = view.comm.sum(np.array([*sums, k2d, laminar, *e_jets]))
    kxm, kym, kzm, half_shear2, k2d, laminar = tot[:6]
    e_jets = tot[6:]

    nan = float("nan")
    kmean = kxm + kym + kzm
    fluct = [max(k - m, 0.0) for k, m in zip(components, (kxm, kym, kzm))]
    rms = [math.sqrt(2 * f) for f in fluct]
    uh = math.sqrt(0.5 * (rms[0] ** 2 + rms[1] ** 2))
    kz = g.kz.ravel()
    num, den = e_jets[1:].sum(), (kz[1:] * e_jets[1:]).sum()
    lz = 2 * math.pi * num / den if den > 0 else nan
    shear = math.sqrt(2 * half_shear2)
    bpe = view.params.BPe
    ri = bpe * (lz / (2 * math.pi)) ** 2 / shear if (shear > 0 and bpe is not None
                                                    and math.isfinite(lz)) else nan
    return {"Kmean": kmean, "Kfluct": K - kmean, "u_fluct_rms": rms[0], "v_fluct_rms": rms[1],
            "w_fluct_rms": rms[2], "isotropy_fluct": rms[2] / uh if uh > 0 else nan,
            "K2d_laminar": laminar, "K2d_pert": k2d - laminar, "K3d": K - k2d,
            "Lz_jets": lz, "Ri_jets": ri}

