"""The shear forcing on the grid: the modes it acts on and what it adds there.

``F = F0 sin(kf y) e_x`` (:class:`shearmix.solver.physics.terms.ShearForcing`) lives on
the modes ``n = (0, +-kf Ly/2pi, 0)`` as ``+-F0/(2i) e_x``; in the Craya-Herring
frame (:mod:`shearmix.solver.physics.basis`) that is ``e1 . F = s F_x`` and
``e2 . F = beta c F_x``. The tendency adds these amplitudes; the diagnostics
compute the injection ``I = <F.u>`` from the same modes.
"""
from __future__ import annotations

import numpy as np


class ForcingModes:
    """The local forced modes as ``(index, f_a, f_p)`` (empty without forcing).

    Iterating gives the triples; :meth:`injection` is this rank's share of
    ``<F.u>`` (``kz = 0``: weight 1 in the half-spectrum Parseval sum).
    """

    def __init__(self, forcing, grid, basis):
        self.modes = []
        if forcing is None or forcing.F0 == 0:
            return
        turns = int(round(forcing.kf * grid.lengths[1] / (2 * np.pi)))
        for sign in (1, -1):
            idx = grid.local_index_of(0, sign * turns, 0)
            if idx is None:
                continue
            fx = sign * forcing.F0 / 2j  # F0 sin(kf y): F0/(2i) at +kf, -F0/(2i) at -kf
            s = basis.s[idx[0], idx[1], 0]
            c = basis.c[idx[0], idx[1], 0]
            beta = basis.beta[idx]
            self.modes.append((idx, s * fx, beta * c * fx))

    def __iter__(self):
        return iter(self.modes)

    def __len__(self):
        return len(self.modes)

    def __getitem__(self, i):
        return self.modes[i]

    def injection(self, a: np.ndarray, p: np.ndarray) -> float:
        """This rank's ``<F.u>`` for the amplitudes ``a``, ``p``."""
        inj = 0.0
        for idx, fa, fp in self.modes:
            inj += (fa * np.conj(a[idx]) + fp * np.conj(p[idx])).real
        return inj
