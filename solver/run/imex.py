"""Implicit-explicit Runge-Kutta schemes: a scheme is its tableau, one driver runs it.

For ``dy/dt = N(y, t) + L y`` (``N`` explicit, ``L`` implicit and linear) an
IMEX Runge-Kutta step with tableaux ``(A_ex, b_ex)`` and ``(A_im, b_im)`` and
nodes ``c`` is (Ascher, Ruuth & Spiteri 1997, Appl. Numer. Math. 25, 151)::

    Y_i  = y_n + h sum_{j<i} A_ex[i,j] N(Y_j) + h sum_{j<=i} A_im[i,j] L Y_j
    y_n+1 = y_n + h sum_j (b_ex[j] N(Y_j) + b_im[j] L Y_j)

:class:`ButcherIMEX` runs any such tableau and keeps every stage.
:class:`LowStorageIMEX` runs tableaux with the structure of Cavaglieri &
Bewley (2015, J. Comput. Phys. 286, 172), ``A[i,j] = b[j]`` for ``j < i-1`` in
both tableaux and ``b_ex = b_im``, in three registers (solution, stage,
explicit tendency) whatever the number of stages.
"""
from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from shearmix.solver.compute import kernels
from shearmix.solver.grid import true_runs


@dataclass(frozen=True)
class IMEXTableau:
    """Butcher tableaux of an IMEX Runge-Kutta scheme."""

    name: str
    order: int
    A_ex: np.ndarray
    A_im: np.ndarray
    b_ex: np.ndarray
    b_im: np.ndarray
    c: np.ndarray
    reference: str

    @property
    def stages(self) -> int:
        return len(self.c)

    def is_low_storage(self, tol: float = 1e-14) -> bool:
        """True when the Cavaglieri-Bewley three-register form applies."""
        s = self.stages
        if not np.allclose(self.b_ex, self.b_im, rtol=0, atol=tol) or self.A_im[0, 0] != 0:
            return False
        for i in range(s):
            for j in range(i - 1):
                if abs(self.A_ex[i, j] - self.b_ex[j]) > tol or \
                        abs(self.A_im[i, j] - self.b_im[j]) > tol:
                    return False
        return True


def _rational(text: str) -> float:
    return float(Fraction(text))


def _cb3c() -> IMEXTableau:
    """IMEXRKCB3c, Cavaglieri & Bewley 2015, J. Comput. Phys. 286, 172-193 (Table 5)."""
    b = np.array([0.0, _rational("673488652607/2334033219546"),
                  _rational("493801219040/853653026979"),
                  _rational("184814777513/1389668723319")])
    c2 = _rational("3375509829940/4525919076317")
    c3 = _rational("272778623835/1039454778728")
    A_im = np.zeros((4, 4))
    A_im[1, 1] = c2
    A_im[2, 1] = _rational("-11712383888607531889907/32694570495602105556248")
    A_im[2, 2] = _rational("566138307881/912153721139")
    A_im[3, :] = b
    A_ex = np.zeros((4, 4))
    A_ex[1, 0] = c2
    A_ex[2, 1] = c3
    A_ex[3, 1] = b[1]
    A_ex[3, 2] = _rational("1660544566939/2334033219546")
    return IMEXTableau("cb3c", 3, A_ex, A_im, b, b.copy(), np.array([0.0, c2, c3, 1.0]),
                       "Cavaglieri & Bewley 2015, J. Comput. Phys. 286, 172 (IMEXRKCB3c)")


def _ars343() -> IMEXTableau:
    """ARS(3,4,3), Ascher, Ruuth & Spiteri 1997, Appl. Numer. Math. 25, 151 (section 2.7).

    The explicit coefficients are the paper's 10-digit decimals.
    """
    g = 0.4358665215084590  # root of 6g^3 - 18g^2 + 9g - 1 = 0 in (1/6, 1/2)
    b1 = -1.5 * g * g + 4 * g - 0.25
    b2 = 1.5 * g * g - 5 * g + 1.25
    A_im = np.zeros((4, 4))
    A_im[1, 1] = g
    A_im[2, 1], A_im[2, 2] = (1 - g) / 2, g
    A_im[3, 1], A_im[3, 2], A_im[3, 3] = b1, b2, g
    A_ex = np.zeros((4, 4))
    A_ex[1, 0] = g
    # printed: a31 = 0.3212788860, a41 = -0.105858296; taken here from the row sums
    # (A_ex 1 = c) so that consistency holds to round-off
    A_ex[2, 1] = 0.3966543747
    A_ex[2, 0] = (1 + g) / 2 - A_ex[2, 1]
    A_ex[3, 1], A_ex[3, 2] = 0.5529291479, 0.5529291479
    A_ex[3, 0] = 1.0 - A_ex[3, 1] - A_ex[3, 2]
    b = np.array([0.0, b1, b2, g])
    return IMEXTableau("ars343", 3, A_ex, A_im, b, b.copy(),
                       np.array([0.0, g, (1 + g) / 2, 1.0]),
                       "Ascher, Ruuth & Spiteri 1997, Appl. Numer. Math. 25, 151 (ARS(3,4,3))")


TABLEAUX = {"cb3c": _cb3c(), "ars343": _ars343()}


class ButcherIMEX:
    """Reference driver for any IMEX tableau; stores every stage's tendencies.

    ``explicit(y, t, out)`` writes ``N(y, t)`` into ``out``; ``operator`` has
    ``apply(y)`` (in place ``y <- L y``) and ``solve(y, h)`` (``y <- (I-hL)^{-1} y``).
    """

    def __init__(self, tableau: IMEXTableau, explicit, operator):
        self.tableau, self.explicit, self.operator = tableau, explicit, operator

    def step(self, y: np.ndarray, t: float, h: float, n0: np.ndarray | None = None):
        tab = self.tableau
        s = tab.stages
        Ns, LYs = [], []
        y0 = y.copy()
        for i in range(s):
            rhs = y0.copy()
            for j in range(i):
                if tab.A_ex[i, j]:
                    rhs += (h * tab.A_ex[i, j]) * Ns[j]
                if tab.A_im[i, j]:
                    rhs += (h * tab.A_im[i, j]) * LYs[j]
            Y = self.operator.solve(rhs, h * tab.A_im[i, i])
            N = np.empty_like(Y)
            if i == 0 and n0 is not None:
                N[...] = n0
            else:
                self.explicit(Y, t + tab.c[i] * h, N)
            Ns.append(N)
            LYs.append(self.operator.apply(Y))
        for j in range(s):
            if tab.b_ex[j]:
                y += (h * tab.b_ex[j]) * Ns[j]
            if tab.b_im[j]:
                y += (h * tab.b_im[j]) * LYs[j]
        return y


class LowStorageIMEX:
    """Three-register driver (solution ``x``, stage ``y``, tendency ``z``).

    With ``A[i+1,j] = b[j]`` for ``j < i`` the next stage's right-hand side is the
    running sum ``x = y_n + h sum_{j<=i} b_j (N_j + L Y_j)`` corrected by the
    last stage only::

        rhs_{i+1} = x + h (A_ex[i+1,i] - b_i) N_i + h (A_im[i+1,i] - b_i) L Y_i

    (Cavaglieri & Bewley 2015, section 3).
    """

    def __init__(self, tableau: IMEXTableau, explicit, operator, template: np.ndarray):
        if not tableau.is_low_storage():
            raise ValueError(f"tableau {tableau.name} has no low-storage form")
        self.tableau, self.explicit, self.operator = tableau, explicit, operator
        # zero outside the 2/3-rule band from the start: the fused path copies
        # and updates the band only, so the stage stays zero there
        self.stage = np.zeros_like(template)
        self.tendency = np.empty_like(template)
        self._band = _band_slices(operator)

    def step(self, x: np.ndarray, t: float, h: float, n0: np.ndarray | None = None):
        """Advance ``x`` (in place) by ``h``; ``n0`` is ``N(x, t)`` if already known."""
        tab = self.tableau
        s = tab.stages
        y, z = self.stage, self.tendency
        fused = kernels.use_numba() and hasattr(self.operator, "flat_entry")
        if fused and self._band is not None:
            # x and y are zero outside the band (the fused update visits it only)
            for where in self._band:
                y[where] = x[where]
        else:
            np.copyto(y, x)
        for i in range(s):
            if i == 0 and n0 is not None:
                if n0 is not z:
                    np.copyto(z, n0)
            else:
                self.explicit(y, t + tab.c[i] * h, z)
            bi = tab.b_ex[i]
            last = i == s - 1
            nxt = i if last else i + 1
            hex_, him = h * (tab.A_ex[nxt, i] - bi), h * (tab.A_im[nxt, i] - bi)
            kernels.stage_update(self.operator, x, y, z, h * bi, hex_, him,
                                 h * tab.A_im[nxt, nxt], last)
        return x


def _band_slices(operator) -> list[tuple] | None:
    """Index tuples covering the 2/3-rule band of a stacked state (kept kx runs x
    kept ky runs x kz below the cutoff), or None for an operator without a grid."""
    grid = getattr(operator, "grid", None)
    if grid is None:
        return None
    kz = slice(0, grid.nz_kept)
    return [(slice(None), slice(*xs), slice(*ys), kz)
            for xs in true_runs(grid.keep_x) for ys in true_runs(grid.keep_y)]


def make_stepper(tableau: IMEXTableau, explicit, operator, template):
    """The low-storage driver where the tableau allows it, the general one otherwise."""
    if tableau.is_low_storage():
        return LowStorageIMEX(tableau, explicit, operator, template)
    return ButcherIMEX(tableau, explicit, operator)
