"""IMEX Runge-Kutta tableaux and drivers.

Order conditions up to third order for additive Runge-Kutta methods (Kennedy &
Carpenter 2003, Appl. Numer. Math. 44, 139, section 2): with common nodes c
and weights b, sum b = 1, b.c = 1/2, b.c^2 = 1/3 and b.A c = 1/6 for A the
explicit and the implicit matrix (which, with equal b and c, also covers the
coupling conditions), and the row sums of both matrices equal c.
"""
import math

import numpy as np
import pytest

from shearmix.solver.run.imex import TABLEAUX, ButcherIMEX, LowStorageIMEX


@pytest.mark.parametrize("name,tol", [("cb3c", 1e-15), ("ars343", 1e-9)])
def test_third_order_conditions(name, tol):
    # ARS(3,4,3)'s explicit coefficients are printed to 10 significant digits in the paper
    t = TABLEAUX[name]
    for A, b in ((t.A_ex, t.b_ex), (t.A_im, t.b_im)):
        assert np.abs(A.sum(axis=1) - t.c).max() < tol
        assert abs(b.sum() - 1) < tol
        assert abs(b @ t.c - 1 / 2) < tol
        assert abs(b @ t.c ** 2 - 1 / 3) < tol
        assert abs(b @ A @ t.c - 1 / 6) < tol
    assert np.allclose(np.triu(t.A_ex), 0) and np.allclose(np.triu(t.A_im, 1), 0)


def test_only_cb3c_has_the_low_storage_form():
    assert TABLEAUX["cb3c"].is_low_storage()
    assert not TABLEAUX["ars343"].is_low_storage()
    with pytest.raises(ValueError):
        LowStorageIMEX(TABLEAUX["ars343"], None, None, np.zeros(1))


class Diagonal:
    """L = diag(lam) on a vector state."""

    def __init__(self, lam):
        self.lam = np.asarray(lam, dtype=float)

    def apply(self, y):
        y *= self.lam
        return y

    def solve(self, y, h):
        y /= 1 - h * self.lam
        return y


def _problem():
    # y' = lam y + cos(t) + y^2/10 (stiff linear part implicit, the rest explicit)
    lam = np.array([-5.0, -1.0, -0.1])  # h*|lam| <= 0.2: clear of stiff order reduction

    def explicit(y, t, out):
        out[...] = math.cos(t) + 0.1 * y ** 2
        return out
    return lam, explicit


def _integrate(driver_cls, h, t_end=1.0):
    lam, explicit = _problem()
    y = np.array([1.0, 0.5, -0.3])
    op = Diagonal(lam)
    tab = TABLEAUX["cb3c"]
    drv = driver_cls(tab, explicit, op, y) if driver_cls is LowStorageIMEX else \
        driver_cls(tab, explicit, op)
    t = 0.0
    for _ in range(round(t_end / h)):
        drv.step(y, t, h)
        t += h
    return y


def test_low_storage_driver_equals_butcher_driver():
    a = _integrate(LowStorageIMEX, 0.01)
    b = _integrate(ButcherIMEX, 0.01)
    assert np.abs(a - b).max() < 1e-14


def test_third_order_convergence_on_a_stiff_nonlinear_ode():
    from scipy.integrate import solve_ivp  # reference integrator (general purpose)
    lam, explicit = _problem()

    def rhs(t, y):
        out = np.empty_like(y)
        return lam * y + explicit(y, t, out)
    ref = solve_ivp(rhs, (0, 1), [1.0, 0.5, -0.3], method="Radau", rtol=1e-13,
                    atol=1e-15).y[:, -1]
    errs = [np.abs(_integrate(LowStorageIMEX, h) - ref).max() for h in (0.04, 0.02, 0.01)]
    orders = [math.log2(errs[i] / errs[i + 1]) for i in range(2)]
    assert all(2.7 < q < 3.4 for q in orders), (errs, orders)
