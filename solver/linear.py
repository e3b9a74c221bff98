"""The implicit part: a linear operator that is block diagonal per wavenumber.

Fields couple only within a wavenumber, and in blocks of at most two (the
poloidal velocity and temperature of the full model exchange energy through
internal gravity waves). :meth:`LinearOperator.solve` inverts ``I - h L``
exactly per wavenumber (Cramer's rule for a 2 x 2 block).
"""
from __future__ import annotations

import numpy as np


class LinearOperator:
    """``L`` on a stacked state ``y[field_index, kx, ky, kz]``.

    Parameters
    ----------
    fields : sequence of field names, in stacking order
    entries : mapping ``(row, col) -> coefficient array`` (broadcastable to a field)
    """

    def __init__(self, fields, entries):
        self.fields = tuple(fields)
        index = {f: i for i, f in enumerate(self.fields)}
        self.entries = {(index[r], index[c]): v for (r, c), v in entries.items()}
        # connected blocks of coupled fields
        parent = list(range(len(self.fields)))

        def find(i):
            while parent[i] != i:
                i = parent[i]
            return i

        for (r, c) in self.entries:
            parent[find(r)] = find(c)
        groups: dict[int, list[int]] = {}
        for i in range(len(self.fields)):
            groups.setdefault(find(i), []).append(i)
        self.blocks = [tuple(g) for g in groups.values()]
        if any(len(b) > 2 for b in self.blocks):
            raise ValueError("linear blocks larger than 2x2 are not supported")
        self._zero = np.zeros(1)
        self._full = {}

    def entry(self, r, c):
        return self.entries.get((r, c), self._zero)

    def full_entry(self, r, c):
        """The coefficient as a contiguous array of the field's shape (for fused kernels)."""
        key = ("full", r, c)
        if key not in self._full:
            shape = np.broadcast_shapes(*(np.shape(v) for v in self.entries.values()))
            arr = np.asarray(self.entry(r, c), dtype=np.float64)
            if not (arr.shape == shape and arr.flags.c_contiguous and arr.flags.writeable):
                # a writable copy: compiled kernels see one array type, and no read-only view
                arr = np.array(np.broadcast_to(arr, shape), dtype=np.float64, order="C")
            self._full[key] = arr
        return self._full[key]

    def apply(self, y: np.ndarray) -> np.ndarray:
        """In place: ``y <- L y``."""
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
                det = m_ii * m_jj - m_ij * m_ji
                yi = y[i].copy()
                y[i] *= m_jj
                y[i] -= m_ij * y[j]
                y[i] /= det
                y[j] *= m_ii
                y[j] -= m_ji * yi
                y[j] /= det
        return y

    def rates(self):
        """Per-field diagonal rates (for documentation and tests)."""
        return {self.fields[i]: self.entry(i, i) for i in range(len(self.fields))}
