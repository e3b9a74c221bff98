"""The implicit part: a linear operator that is block diagonal per wavenumber.

Fields couple only within a wavenumber, and in blocks of at most two (the
poloidal velocity and temperature of the full model exchange energy through
internal gravity waves). :meth:`LinearOperator.solve` inverts ``I - h L``
exactly per wavenumber (Cramer's rule for a 2 x 2 block).

A field fed one way by another and feeding nothing back (a passive tracer,
``L[c, p] != 0``, ``L[p, c] = 0``) is a *follower*: ``I - h L`` is then block
lower triangular, and the follower is solved exactly after the block it
follows, ``c <- (c + h L[c,p] p_new) / (1 - h L[c,c])``.
"""
from __future__ import annotations

import numpy as np

from shearmix.solver.compute import kernels


def evaluate(rows, k2: np.ndarray, alpha: np.ndarray) -> np.ndarray:
    """``sum c |k|^(2m) alpha^n`` over rows ``(c, m, n)``; negative ``m`` gives 0 at k = 0."""
    out = np.zeros(np.broadcast_shapes(k2.shape, alpha.shape))
    k2safe = np.where(k2 == 0, 1.0, k2)
    for c, m, n in rows:
        term = c * k2safe ** m * alpha ** n
        if m < 0:
            term = np.where(k2 == 0, 0.0, term)
        out += term
    return out


class LinearOperator:
    """``L`` on a stacked state ``y[field_index, kx, ky, kz]``.

    Parameters
    ----------
    fields : sequence of field names, in stacking order
    entries : mapping ``(row, col) -> rows (c, m, n)`` of monomials ``c |k|^(2m) alpha^n``
    grid, basis : where the coefficients are evaluated
    """

    def __init__(self, fields, entries, grid, basis):
        self.fields = tuple(fields)
        self.grid, self.basis = grid, basis
        index = {f: i for i, f in enumerate(self.fields)}
        self.monomials = {(index[r], index[c]): list(v) for (r, c), v in entries.items()}
        self._arrays = {}
        self._tables = {}
        # connected blocks of coupled fields
        parent = list(range(len(self.fields)))

        def find(i):
            while parent[i] != i:
                i = parent[i]
            return i

        one_way = {(r, c) for (r, c) in self.monomials
                   if r != c and (c, r) not in self.monomials}
        #: ``(follower, leader)`` pairs: ``L[f, l] != 0`` and ``L[l, f] = 0``
        self.followers = sorted(one_way)
        led = {f for f, _ in self.followers}
        if len(led) != len(self.followers) or led & {l for _, l in self.followers}:
            raise ValueError("a one-way coupled field must follow exactly one field "
                             "that follows none")
        for (r, c) in self.monomials:
            if (r, c) not in one_way:
                parent[find(r)] = find(c)
        groups: dict[int, list[int]] = {}
        for i in range(len(self.fields)):
            if i not in led:
                groups.setdefault(find(i), []).append(i)
        self.blocks = [tuple(g) for g in groups.values()]
        if any(len(b) > 2 for b in self.blocks):
            raise ValueError("linear blocks larger than 2x2 are not supported")
        self._zero = np.zeros(1)

    def entry(self, r, c):
        """The coefficient ``L[r, c]`` as an array over the slab (made on first use)."""
        if (r, c) not in self.monomials:
            return self._zero
        if (r, c) not in self._arrays:
            self._arrays[(r, c)] = evaluate(self.monomials[(r, c)], self.grid.k2,
                                            self.basis.alpha)
        return self._arrays[(r, c)]

    def flat_entry(self, r, c) -> np.ndarray:
        """``L[r, c]`` as a contiguous, writable 1-D array over the slab (compiled kernels).

        Entries with the same monomials share one array.
        """
        return self._flat(tuple(self.monomials.get((r, c), [])))

    def _flat(self, key) -> np.ndarray:
        """The contiguous 1-D table of monomials ``key`` over the slab (shared by key)."""
        if key not in self._tables:
            shape = self.grid.spectral_shape
            arr = np.zeros(shape) if not key else np.array(
                np.broadcast_to(evaluate(key, self.grid.k2, self.basis.alpha), shape),
                dtype=np.float64, order="C")
            self._tables[key] = arr.reshape(-1)
        return self._tables[key]

    def follower_tables(self):
        """For the compiled stage update: per follower ``(f, lead, c_ff, T_ff, c_fl, T_fl)``
        with ``L[f, f] = c_ff T_ff`` and ``L[f, lead] = c_fl T_fl``, where each ``T`` is
        the shared table of one monomial ``|k|^(2m) alpha^n`` (:meth:`_flat`), so that
        tracers add no coefficient arrays: a tracer's two entries are the tables of
        ``|k|^2`` and ``alpha`` times its own ``-1/Pe_c`` and ``G``. For those (one
        factor of each monomial is exactly 1) ``c T`` equals :meth:`entry` bit for
        bit. None when some follower entry is not a single monomial."""
        out = []
        for f, lead in self.followers:
            own, cross = self.monomials.get((f, f), []), self.monomials[(f, lead)]
            if len(own) > 1 or len(cross) != 1:
                return None
            (c_ff, m_ff, n_ff), = own or [(0.0, 0, 0)]
            (c_fl, m_fl, n_fl), = cross
            out.append((f, lead, float(c_ff), self._flat(((1.0, m_ff, n_ff),)),
                        float(c_fl), self._flat(((1.0, m_fl, n_fl),))))
        return out

    def prepare(self) -> None:
        """Evaluate every coefficient array the compiled stage update reads now (before a
        run's large arrays exist, so that the temporaries of the evaluation do not add
        to the peak memory)."""
        for block in self.blocks:
            for r in block:
                for c in block:
                    self.flat_entry(r, c)
        if self.follower_tables() is None:
            for f, lead in self.followers:
                self.entry(f, f)
                self.entry(f, lead)

    def apply_followers(self, y: np.ndarray) -> None:
        """In place, the followers' rows of ``y <- L y`` (before the leaders change)."""
        for f, lead in self.followers:
            y[f] *= self.entry(f, f)
            y[f] += self.entry(f, lead) * y[lead]

    def solve_followers(self, y: np.ndarray, h: float) -> None:
        """In place, the followers' rows of ``y <- (I - h L)^{-1} y``, once the leaders'
        rows are solved: ``y_f <- (y_f + h L[f,l] y_l) / (1 - h L[f,f])``."""
        for f, lead in self.followers:
            y[f] += (h * self.entry(f, lead)) * y[lead]
            y[f] /= 1.0 - h * self.entry(f, f)

    def apply(self, y: np.ndarray) -> np.ndarray:
        """In place: ``y <- L y``."""
        self.apply_followers(y)
        for b in self.blocks:
            if len(b) == 1:
                i = b[0]
                y[i] *= self.entry(i, i)
            else:
                i, j = b
                yi = y[i].copy()
                y[i] *= self.entry(i, i)
                y[i] += self.entry(i, j) * y[j]
                y[j] *= self.entry(j, j)
                y[j] += self.entry(j, i) * yi
        return y

    def solve(self, y: np.ndarray, h: float) -> np.ndarray:
        """In place: ``y <- (I - h L)^{-1} y``."""
        if h == 0.0:
            return y
        for b in self.blocks:
            if len(b) == 1:
                i = b[0]
                y[i] /= 1.0 - h * self.entry(i, i)
            else:
                i, j = b
                m_ii = 1.0 - h * self.entry(i, i)
                m_jj = 1.0 - h * self.entry(j, j)
                m_ij = -h * self.entry(i, j)
                m_ji = -h * self.entry(j, i)
                kernels.solve_pair(m_ii, m_ij, m_ji, m_jj, y[i], y[j])
        self.solve_followers(y, h)
        return y
