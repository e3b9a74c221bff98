"""Fused element-wise kernels of the time step (Numba), with NumPy equivalents.

A pseudo-spectral step should cost little more than its FFTs. In NumPy each
element-wise expression is a pass over memory with temporaries; here each
job is one compiled loop over the spectral (or physical) slab that reads and
writes each element once. The NumPy versions define the arithmetic; the
Numba versions must agree with them to round-off (tests/solver/test_kernels.py).

The backend is the case's ``compute.kernels``
(:class:`shearmix.solver.compute.options.ComputeOptions`), set by the simulation with :func:`set_backend`; the NumPy versions run when
Numba is not installed. Compiled kernels are cached on disk (``cache=True``) so
later runs start in well under a second.
"""
from __future__ import annotations

import numpy as np

try:  # pragma: no cover - depends on the installation
    import numba
    HAVE_NUMBA = True
except ImportError:  # pragma: no cover
    numba = None
    HAVE_NUMBA = False


from shearmix.solver.compute.options import KERNEL_BACKENDS as BACKENDS  # noqa: E402

#: whether the compiled kernels run (a module flag: the kernels ask per block)
_COMPILED = [HAVE_NUMBA]


def set_backend(name: str) -> None:
    """Run the ``'numba'`` (if installed) or the ``'numpy'`` kernels from now on."""
    if name not in BACKENDS:
        raise ValueError(f"compute.kernels: must be one of {', '.join(BACKENDS)}, got {name!r}")
    _COMPILED[0] = HAVE_NUMBA and name == "numba"


def use_numba() -> bool:
    """Whether the compiled kernels run."""
    return _COMPILED[0]


def _jit(fn):
    # error_model="numpy": a division gives inf/nan as NumPy does instead of a
    # per-element zero check, which kept LLVM from vectorising the loops
    # (docs/performance.md has the measurement).
    # No fastmath: results stay identical to the NumPy definitions to round-off.
    if not HAVE_NUMBA:
        return None
    return numba.njit(cache=True, fastmath=False, nogil=True, error_model="numpy")(fn)

# ---------------------------------------------------------------- frame geometry
def _frame(kh, kz):
    """``(alpha, beta) = (kh/|k|, kz/|k|)`` (solver/physics/basis.py); ``(0, 0)`` at k = 0.

    Branch free, so that loops calling it vectorise; the k = 0 mode carries no
    velocity, so its beta is never used.
    """
    inv = 1.0 / np.sqrt(max(kh * kh + kz * kz, 1e-300))
    return kh * inv, kz * inv


_frame_nb = _jit(_frame)


def _cartesian(s, c, al, be, a, p):
    """``(u, v, w)`` of ``a e1 + p e2`` for real ``a``, ``p`` (one part of a complex
    amplitude): the compiled twin of
    :meth:`shearmix.solver.physics.basis.CrayaHerring.to_cartesian`."""
    return s * a + c * be * p, s * be * p - c * a, -al * p


def _projection(s, c, al, be, nx, ny, nz):
    """``(a, p)`` of the real vector ``(nx, ny, nz)``: the compiled twin of
    :meth:`shearmix.solver.physics.basis.CrayaHerring.project`."""
    return s * nx - c * ny, be * (c * nx + s * ny) - al * nz


_cartesian_nb = _jit(_cartesian)
_projection_nb = _jit(_projection)


# ---------------------------------------------------------------- frame -> Cartesian
def _velocity_loop(a, p, s, c, kh, kz, keepx, keepy, nkz, u, v, w):
    # outside the dealiased band the state is zero: write zeros without reading it
    nx, ny, nz = a.shape
    for i in range(nx):
        for j in range(ny):
            if not (keepx[i] and keepy[j]):
                u[i, j, :] = 0.0
                v[i, j, :] = 0.0
                w[i, j, :] = 0.0
                continue
            sij = s[i, j, 0]
            cij = c[i, j, 0]
            khij = kh[i, j, 0]
            for k in range(nkz):
                al, be = _frame_nb(khij, kz[k])
                ur, vr, wr = _cartesian_nb(sij, cij, al, be, a[i, j, k].real, p[i, j, k].real)
                ui, vi, wi = _cartesian_nb(sij, cij, al, be, a[i, j, k].imag, p[i, j, k].imag)
                u[i, j, k] = complex(ur, ui)
                v[i, j, k] = complex(vr, vi)
                w[i, j, k] = complex(wr, wi)
            u[i, j, nkz:] = 0.0
            v[i, j, nkz:] = 0.0
            w[i, j, nkz:] = 0.0


_velocity_nb = _jit(_velocity_loop)


def velocity(a, p, basis, band, u, v, w):
    """All three Cartesian components of ``a e1 + p e2`` in one pass over the slab.

    ``band = (keep_x, keep_y, nz_kept)`` (:class:`shearmix.solver.grid.Grid`): the state
    is zero outside the dealiased band, so the compiled pass reads only inside it.
    """
    if use_numba():
        _velocity_nb(a, p, basis.s, basis.c, basis.kh, basis.kz, *band, u, v, w)
        return
    for comp, out in enumerate((u, v, w)):
        basis.to_cartesian(a, p, comp, out)


# ---------------------------------------------------------------- advection from products
def _momentum_loop(P0, P1, P2, P3, P4, scale, keepx, keepy, nkz, kx, ky, kz, s, c, kh,
                   out):
    # the band test is per row, so that the inner loop is branch free and vectorises
    nx, ny = P0.shape[0], P0.shape[1]
    for i in range(nx):
        kxi = kx[i]
        for j in range(ny):
            if not (keepx[i] and keepy[j]):
                out[0, i, j, :] = 0.0
                out[1, i, j, :] = 0.0
                continue
            kyj = ky[j]
            sij = s[i, j, 0]
            cij = c[i, j, 0]
            khij = kh[i, j, 0]
            for k in range(nkz):
                kzk = kz[k]
                p0, p1, p2, p3, p4 = P0[i, j, k], P1[i, j, k], P2[i, j, k], \
                    P3[i, j, k], P4[i, j, k]
                # S = k_j (u_i u_j)^ per component; N = -i S / N_points
                sxr = kxi * p0.real + kyj * p2.real + kzk * p3.real
                sxi = kxi * p0.imag + kyj * p2.imag + kzk * p3.imag
                syr = kxi * p2.real + kyj * p1.real + kzk * p4.real
                syi = kxi * p2.imag + kyj * p1.imag + kzk * p4.imag
                szr = kxi * p3.real + kyj * p4.real
                szi = kxi * p3.imag + kyj * p4.imag
                nxr, nxi = sxi * scale, -sxr * scale
                nyr, nyi = syi * scale, -syr * scale
                nzr, nzi = szi * scale, -szr * scale
                al, be = _frame_nb(khij, kzk)
                ar, pr = _projection_nb(sij, cij, al, be, nxr, nyr, nzr)
                ai, pi = _projection_nb(sij, cij, al, be, nxi, nyi, nzi)
                out[0, i, j, k] = complex(ar, ai)
                out[1, i, j, k] = complex(pr, pi)
            out[0, i, j, nkz:] = 0.0
            out[1, i, j, nkz:] = 0.0


def _scalar_flux_loop(P0, P1, P2, scale, keepx, keepy, nkz, kx, ky, kz, out):
    nx, ny = P0.shape[0], P0.shape[1]
    for i in range(nx):
        for j in range(ny):
            if not (keepx[i] and keepy[j]):
                out[i, j, :] = 0.0
                continue
            for k in range(nkz):
                q0, q1, q2 = P0[i, j, k], P1[i, j, k], P2[i, j, k]
                sr = kx[i] * q0.real + ky[j] * q1.real + kz[k] * q2.real
                si = kx[i] * q0.imag + ky[j] * q1.imag + kz[k] * q2.imag
                out[i, j, k] = complex(si * scale, -sr * scale)
            out[i, j, nkz:] = 0.0


_momentum_nb = _jit(_momentum_loop)
_scalar_flux_nb = _jit(_scalar_flux_loop)


def momentum_advection(P, mask, scale, band, kvec, basis, out):
    """Frame amplitudes of ``-div(u u)`` from the transformed products.

    ``P`` is a sequence of five arrays: the unnormalised transforms of
    ``uu-ww, vv-ww, uv, uw, vw``; ``N_i = -i k_j (u_i u_j)_k`` (the dropped ``ww``
    trace is a gradient), dealiased (``mask`` = D/N, or ``band`` (Grid.keep_x,
    keep_y, nz_kept) and ``scale`` = 1/N),
    then ``out[0] = e1 . N``, ``out[1] = e2 . N`` (solver/physics/basis.py).
    """
    if use_numba():
        _momentum_nb(P[0], P[1], P[2], P[3], P[4], scale, band[0], band[1], band[2],
                     kvec[0], kvec[1], kvec[2], basis.s, basis.c, basis.kh, out)
        return
    kx, ky, kz = (kvec[0].reshape(-1, 1, 1), kvec[1].reshape(1, -1, 1),
                  kvec[2].reshape(1, 1, -1))
    Nx = -1j * (kx * P[0] + ky * P[2] + kz * P[3]) * mask
    Ny = -1j * (kx * P[2] + ky * P[1] + kz * P[4]) * mask
    Nz = -1j * (kx * P[3] + ky * P[4]) * mask
    basis.project(Nx, Ny, Nz, out[0], out[1])


def scalar_advection(P, mask, scale, band, kvec, out):
    """``out = -div(u T)`` from the transforms ``P[0..2]`` of ``uT, vT, wT``, dealiased."""
    if use_numba():
        _scalar_flux_nb(P[0], P[1], P[2], scale, band[0], band[1], band[2],
                        kvec[0], kvec[1], kvec[2], out)
        return
    kx, ky, kz = (kvec[0].reshape(-1, 1, 1), kvec[1].reshape(1, -1, 1),
                  kvec[2].reshape(1, 1, -1))
    out[...] = -1j * (kx * P[0] + ky * P[1] + kz * P[2]) * mask


def velocity_rows(a, p, basis, band, u, v, w, lo, hi) -> None:
    """:func:`velocity` for the local ky rows ``lo:hi`` only, compiled only: ``u, v,
    w`` are ``(nx, hi - lo, nz_kept)`` arrays (what
    :class:`shearmix.solver.compute.roundtrip.RoundTrip` hands its ``start``),
    zero at the dropped kx."""
    keepx, keepy, nkz = band
    _velocity_nb(a[:, lo:hi], p[:, lo:hi], basis.s[:, lo:hi], basis.c[:, lo:hi],
                 basis.kh[:, lo:hi], basis.kz, keepx, keepy[lo:hi], nkz, u, v, w)


def advection_rows(stresses, scalars, scale, band, kvec, basis, out, lo, hi) -> None:
    """:func:`momentum_advection` (and :func:`scalar_advection` of each ``(fluxes,
    index)`` of ``scalars`` into ``out[index]``) for the local ky rows ``lo:hi`` only,
    compiled only.

    The transforms are ``(nx, hi - lo, nz_kept)`` arrays of those rows (what
    :class:`shearmix.solver.compute.roundtrip.RoundTrip` hands its ``finish``);
    ``out`` is the whole tendency, of which rows ``lo:hi`` are written (zero
    past the kz cutoff and at the dropped kx), the rest left alone.
    """
    keepx, keepy, nkz = band
    kx, ky, kz = kvec
    s, c, kh = basis.s[:, lo:hi], basis.c[:, lo:hi], basis.kh[:, lo:hi]
    _momentum_nb(*stresses, scale, keepx, keepy[lo:hi], nkz, kx, ky[lo:hi], kz, s, c, kh,
                 out[:2, :, lo:hi])
    for fluxes, index in scalars:
        _scalar_flux_nb(*fluxes, scale, keepx, keepy[lo:hi], nkz, kx, ky[lo:hi], kz,
                        out[index, :, lo:hi])


# ---------------------------------------------------------------- physical products
def _stresses_loop(u, v, w, uv, uu_ww):
    n = u.size
    uf = u.reshape(n)
    vf = v.reshape(n)
    wf = w.reshape(n)
    pf = uv.reshape(n)
    qf = uu_ww.reshape(n)
    for i in range(n):
        a = uf[i]
        b = vf[i]
        c = wf[i]
        pf[i] = a * b
        qf[i] = a * a - c * c
        uf[i] = a * c
        vf[i] = b * b - c * c
        wf[i] = b * c


_stresses_nb = _jit(_stresses_loop)


def stresses(u, v, w, uv, uu_ww):
    """The five stresses from one read of the velocity: ``uv``, ``uu - ww`` into
    the two given arrays, and ``u <- uw``, ``v <- vv - ww``, ``w <- vw``."""
    if use_numba():
        _stresses_nb(u, v, w, uv, uu_ww)
        return
    # each written over a factor only once both its products are made
    np.multiply(u, v, out=uv)
    uw = u * w
    np.subtract(u * u, w * w, out=uu_ww)
    np.copyto(u, uw)
    vw = v * w
    np.subtract(v * v, w * w, out=v)
    np.copyto(w, vw)


def _scalar_fluxes_loop(u, v, w, T, uT, vT):
    n = u.size
    uf = u.reshape(n)
    vf = v.reshape(n)
    wf = w.reshape(n)
    tf = T.reshape(n)
    af = uT.reshape(n)
    bf = vT.reshape(n)
    for i in range(n):
        t = tf[i]
        af[i] = uf[i] * t
        bf[i] = vf[i] * t
        tf[i] = wf[i] * t


_scalar_fluxes_nb = _jit(_scalar_fluxes_loop)


def scalar_fluxes(u, v, w, T, uT, vT):
    """``uT``, ``vT`` into the given arrays and ``T <- wT``, from one read of ``T``."""
    if use_numba():
        _scalar_fluxes_nb(u, v, w, T, uT, vT)
        return
    np.multiply(u, T, out=uT)
    np.multiply(v, T, out=vT)
    np.multiply(w, T, out=T)


# ---------------------------------------------------------------- diagnostics sums
#: order of the sums returned by :func:`spectral_sums`
SUM_NAMES = ("Kx", "Ky", "Kz", "grad2", "wT", "T2", "gradT2", "w_ilap_w", "b2")


def _sums_loop(a, p, T, has_T, s, c, kh, kz, sums, e_h):
    nx, ny, nz = a.shape
    for i in range(nx):
        for j in range(ny):
            sij = s[i, j, 0]
            cij = c[i, j, 0]
            khij = kh[i, j, 0]
            kh2 = khij * khij
            for k in range(nz):
                w = 2.0 if k > 0 else 1.0
                ar, ai = a[i, j, k].real, a[i, j, k].imag
                pr, pi = p[i, j, k].real, p[i, j, k].imag
                al, be = _frame_nb(khij, kz[k])
                uxr, uyr, _ = _cartesian_nb(sij, cij, al, be, ar, pr)
                uxi, uyi, _ = _cartesian_nb(sij, cij, al, be, ai, pi)
                ux2 = uxr * uxr + uxi * uxi
                uy2 = uyr * uyr + uyi * uyi
                p2 = pr * pr + pi * pi
                uz2 = al * al * p2
                k2 = kh2 + kz[k] * kz[k]
                sums[0] += 0.5 * w * ux2
                sums[1] += 0.5 * w * uy2
                sums[2] += 0.5 * w * uz2
                sums[3] += w * k2 * (ar * ar + ai * ai + p2)
                e_h[k] += 0.5 * w * (ux2 + uy2)
                if has_T:
                    tr, ti = T[i, j, k].real, T[i, j, k].imag
                    t2 = tr * tr + ti * ti
                    sums[4] += -w * al * (pr * tr + pi * ti)
                    sums[5] += w * t2
                    sums[6] += w * k2 * t2
                elif k2 > 0.0:
                    sums[7] -= w * uz2 / k2
                    sums[8] += w * uz2 / (k2 * k2)


_sums_nb = _jit(_sums_loop)


def spectral_sums(a, p, T, basis, grid):
    """Local half-spectrum sums behind the diagnostics, and ``E_h(kz)``.

    Returns ``(sums, e_h)`` with ``sums`` ordered as :data:`SUM_NAMES`:
    ``<u^2>/2`` per component, ``<|grad u|^2>``, ``<w T>``, ``<T^2>``, ``<|grad T|^2>``,
    ``<w lap^-1 w>`` and ``<(lap^-1 w)^2>`` (the last two without T), each by
    Parseval over this rank's modes, and the horizontal kinetic energy per kz index.
    """
    sums = np.zeros(len(SUM_NAMES))
    e_h = np.zeros(grid.nzc)
    has_T = T is not None
    if use_numba():
        _sums_nb(a, p, a if T is None else T, has_T, basis.s, basis.c, basis.kh, basis.kz,
                 sums, e_h)
        return sums, e_h
    w = grid.half_weight
    alpha, k2 = basis.alpha, grid.k2
    for i in range(3):
        comp = np.empty(grid.spectral_shape, complex)
        basis.to_cartesian(a, p, i, comp)
        power = comp.real ** 2 + comp.imag ** 2
        sums[i] = 0.5 * grid.volume_sum(power)
        if i < 2:
            e_h += 0.5 * (w * power).sum(axis=(0, 1))
    ap2 = a.real ** 2 + a.imag ** 2 + p.real ** 2 + p.imag ** 2
    sums[3] = grid.volume_sum(k2 * ap2)
    w2 = alpha ** 2 * (p.real ** 2 + p.imag ** 2)
    if has_T:
        t2 = T.real ** 2 + T.imag ** 2
        sums[4] = grid.volume_sum(-(alpha * (p * np.conj(T))).real)
        sums[5] = grid.volume_sum(t2)
        sums[6] = grid.volume_sum(k2 * t2)
    else:
        k2safe = np.where(k2 == 0, 1.0, k2)
        sums[7] = -grid.volume_sum(w2 / k2safe)
        sums[8] = grid.volume_sum(w2 / k2safe ** 2)
    return sums, e_h


# ---------------------------------------------------------------- CFL and max speed
def _speed_loop(u, v, w, idx, idy, idz):
    n = u.size
    uf = u.reshape(n)
    vf = v.reshape(n)
    wf = w.reshape(n)
    rate = 0.0
    speed2 = 0.0
    for e in range(n):
        a = uf[e]
        b = vf[e]
        c = wf[e]
        r = abs(a) * idx + abs(b) * idy + abs(c) * idz
        q = a * a + b * b + c * c
        if r > rate or r != r:  # r != r keeps a NaN
            rate = r
        if q > speed2 or q != q:
            speed2 = q
    return rate, speed2


_speed_nb = _jit(_speed_loop)


def speed_limits(u, v, w, dx, work):
    """``(max(|u|/dx + |v|/dy + |w|/dz), max(u^2+v^2+w^2))`` on this rank; NaN propagates."""
    if use_numba():
        return _speed_nb(u, v, w, 1.0 / dx[0], 1.0 / dx[1], 1.0 / dx[2])
    np.abs(u, out=work)
    work *= 1.0 / dx[0]
    work += np.abs(v) * (1.0 / dx[1])
    work += np.abs(w) * (1.0 / dx[2])
    rate = float(work.max())
    np.multiply(u, u, out=work)
    work += v * v
    work += w * w
    return rate, float(work.max())


# ---------------------------------------------------------------- low-storage stage update
def _stage_scalar_loop(x, y, z, L, keepx, keepy, nkz, hb, hex_, him, haii, last):
    # x, y, z: one field's (nx, ny, nz) complex slab, L its real coefficient;
    # only the dealiased band is visited (outside it all four are zero)
    nx, ny = x.shape[0], x.shape[1]
    for i in range(nx):
        if not keepx[i]:
            continue
        for j in range(ny):
            if not keepy[j]:
                continue
            xr_, yr_, zr_, Lr = x[i, j], y[i, j], z[i, j], L[i, j]
            for e in range(nkz):
                lam = Lr[e]
                yr = yr_[e].real
                yi = yr_[e].imag
                zr = zr_[e].real
                zi = zr_[e].imag
                lyr = lam * yr
                lyi = lam * yi
                xr = xr_[e].real + hb * (zr + lyr)
                xi = xr_[e].imag + hb * (zi + lyi)
                xr_[e] = complex(xr, xi)
                if not last:
                    d = 1.0 / (1.0 - haii * lam)
                    yr_[e] = complex((xr + hex_ * zr + him * lyr) * d,
                                     (xi + hex_ * zi + him * lyi) * d)


def _stage_pair_loop(X1, X2, Y1, Y2, Z1, Z2, M11, M12, M21, M22, keepx, keepy, nkz,
                     hb, hex_, him, haii, last):
    # written out in real arithmetic: Numba's complex operators do not vectorise
    nx, ny = X1.shape[0], X1.shape[1]
    for i in range(nx):
        if not keepx[i]:
            continue
        for j in range(ny):
            if not keepy[j]:
                continue
            x1, x2, y1, y2, z1, z2 = X1[i, j], X2[i, j], Y1[i, j], Y2[i, j], Z1[i, j], Z2[i, j]
            L11, L12, L21, L22 = M11[i, j], M12[i, j], M21[i, j], M22[i, j]
            for e in range(nkz):
                l11 = L11[e]
                l12 = L12[e]
                l21 = L21[e]
                l22 = L22[e]
                ar = y1[e].real
                ai = y1[e].imag
                br = y2[e].real
                bi = y2[e].imag
                zar = z1[e].real
                zai = z1[e].imag
                zbr = z2[e].real
                zbi = z2[e].imag
                l1r = l11 * ar + l12 * br
                l1i = l11 * ai + l12 * bi
                l2r = l21 * ar + l22 * br
                l2i = l21 * ai + l22 * bi
                xar = x1[e].real + hb * (zar + l1r)
                xai = x1[e].imag + hb * (zai + l1i)
                xbr = x2[e].real + hb * (zbr + l2r)
                xbi = x2[e].imag + hb * (zbi + l2i)
                x1[e] = complex(xar, xai)
                x2[e] = complex(xbr, xbi)
                if not last:
                    r1r = xar + hex_ * zar + him * l1r
                    r1i = xai + hex_ * zai + him * l1i
                    r2r = xbr + hex_ * zbr + him * l2r
                    r2i = xbi + hex_ * zbi + him * l2i
                    m11 = 1.0 - haii * l11
                    m12 = -haii * l12
                    m21 = -haii * l21
                    m22 = 1.0 - haii * l22
                    inv = 1.0 / (m11 * m22 - m12 * m21)
                    y1[e] = complex((m22 * r1r - m12 * r2r) * inv, (m22 * r1i - m12 * r2i) * inv)
                    y2[e] = complex((m11 * r2r - m21 * r1r) * inv, (m11 * r2i - m21 * r1i) * inv)


def _follower_rhs_loop(X, Y, Z, YL, TF, TL, cf, cl, keepx, keepy, nkz, hb, hex_, him, last):
    # a follower before its leader's solve, as stage_update_numpy's rows of it:
    # Ly = L_ff y + L_fl y_lead (L_ff = cf TF, L_fl = cl TL), x += hb (z + Ly), then
    # unless last y <- x + hex z + him Ly (solved once the leader is, below)
    nx, ny = X.shape[0], X.shape[1]
    for i in range(nx):
        if not keepx[i]:
            continue
        for j in range(ny):
            if not keepy[j]:
                continue
            x_, y_, z_, yl_, tf, tl = X[i, j], Y[i, j], Z[i, j], YL[i, j], TF[i, j], TL[i, j]
            for e in range(nkz):
                lf = cf * tf[e]
                ll = cl * tl[e]
                lyr = lf * y_[e].real + ll * yl_[e].real
                lyi = lf * y_[e].imag + ll * yl_[e].imag
                zr = z_[e].real
                zi = z_[e].imag
                xr = x_[e].real + hb * (zr + lyr)
                xi = x_[e].imag + hb * (zi + lyi)
                x_[e] = complex(xr, xi)
                if not last:
                    y_[e] = complex(xr + hex_ * zr + him * lyr, xi + hex_ * zi + him * lyi)


def _follower_solve_loop(Y, YL, TF, TL, cf, cl, keepx, keepy, nkz, h):
    # y <- (y + h L_fl y_lead) / (1 - h L_ff), the leader already solved
    nx, ny = Y.shape[0], Y.shape[1]
    for i in range(nx):
        if not keepx[i]:
            continue
        for j in range(ny):
            if not keepy[j]:
                continue
            y_, yl_, tf, tl = Y[i, j], YL[i, j], TF[i, j], TL[i, j]
            for e in range(nkz):
                a = h * (cl * tl[e])
                d = 1.0 / (1.0 - h * (cf * tf[e]))
                y_[e] = complex((y_[e].real + a * yl_[e].real) * d,
                                (y_[e].imag + a * yl_[e].imag) * d)


_stage_scalar_nb = _jit(_stage_scalar_loop)
_stage_pair_nb = _jit(_stage_pair_loop)
_follower_rhs_nb = _jit(_follower_rhs_loop)
_follower_solve_nb = _jit(_follower_solve_loop)


def solve_pair(m11, m12, m21, m22, y1, y2) -> None:
    """In place, per mode: ``(y1, y2) <- M^{-1} (y1, y2)`` for ``M = [[m11, m12], [m21, m22]]``
    by Cramer's rule (the NumPy definition; the compiled twin is the solve inside
    ``_stage_pair_loop``, which multiplies by ``1/det``)."""
    det = m11 * m22 - m12 * m21
    y1_old = y1.copy()
    y1 *= m22
    y1 -= m12 * y2
    y1 /= det
    y2 *= m11
    y2 -= m21 * y1_old
    y2 /= det


def stage_update_numpy(operator, x, y, z, hb, hex_, him, haii, last):
    """The NumPy definition of :func:`stage_update` for any operator with ``apply`` and
    ``solve``: ``Ly = L y``, ``x += hb z``, ``x += hb Ly``, then unless ``last``
    ``y <- (I - haii L)^{-1} (x + hex z + him Ly)`` (the compiled twin adds
    ``hb (z + Ly)`` in one go: equal to round-off)."""
    operator.apply(y)  # y <- L Y_i
    if hb:
        x += hb * z
        x += hb * y
    if last:
        return
    y *= him
    y += x
    y += hex_ * z
    operator.solve(y, haii)


def stage_update(operator, x, y, z, hb, hex_, him, haii, last):
    """One stage of :class:`shearmix.solver.run.imex.LowStorageIMEX`: compiled (fused, in
    one pass) for a block operator when the compiled kernels run, else
    :func:`stage_update_numpy`.

    With ``Ly = L y``: ``x += hb (z + Ly)``; unless ``last``,
    ``y <- (I - haii L)^{-1} (x + hex z + him Ly)``. The coefficients are the
    operator's arrays (evaluated once from the terms' monomials): computing them
    per mode inside the loop costs more (docs/performance.md).

    Only the 2/3-rule band is visited: outside it the state and the tendency
    are zero (the simulation keeps them so), and zero stays zero under this
    update, so the result equals the update of every mode.
    """
    if not (use_numba() and hasattr(operator, "flat_entry")):
        stage_update_numpy(operator, x, y, z, hb, hex_, him, haii, last)
        return
    g = operator.grid
    band = (g.keep_x, g.keep_y, g.nz_kept)
    shape = x.shape[1:]

    def table(r, c):
        return operator.flat_entry(r, c).reshape(shape)

    followers = getattr(operator, "followers", ())
    fused = operator.follower_tables() if followers else None
    if fused:
        # a follower's L y needs its leader's state before the leader's solve
        for f, lead, cf, tf, cl, tl in fused:
            _follower_rhs_nb(x[f], y[f], z[f], y[lead], tf.reshape(shape), tl.reshape(shape),
                             cf, cl, *band, hb, hex_, him, last)
    elif followers:
        # followers the tables cannot describe: the same operations as
        # stage_update_numpy, on the followers' rows
        rows = [f for f, _ in followers]
        operator.apply_followers(y)
        for f in rows:
            if hb:
                x[f] += hb * z[f]
                x[f] += hb * y[f]
            if not last:
                y[f] *= him
                y[f] += x[f]
                y[f] += hex_ * z[f]
    for block in operator.blocks:
        if len(block) == 1:
            f = block[0]
            _stage_scalar_nb(x[f], y[f], z[f], table(f, f), *band, hb, hex_, him, haii, last)
        else:
            f, h = block
            _stage_pair_nb(x[f], x[h], y[f], y[h], z[f], z[h],
                           table(f, f), table(f, h), table(h, f), table(h, h),
                           *band, hb, hex_, him, haii, last)
    if fused and not last:
        for f, lead, cf, tf, cl, tl in fused:
            _follower_solve_nb(y[f], y[lead], tf.reshape(shape), tl.reshape(shape), cf, cl,
                               *band, haii)
    elif followers and not last:
        operator.solve_followers(y, haii)


class _TinyFrame:
    """Frame arrays shaped as :class:`shearmix.solver.physics.basis.CrayaHerring` holds
    them (``s, c, kh``: ``(nx, ny, 1)``; ``kz``: 1-D), for :func:`warm_up`."""

    def __init__(self, n: int):
        self.s = self.c = self.kh = np.ones((n, n, 1))
        self.kz = np.ones(n)


def warm_up() -> None:
    """Load (or compile) the kernels a run calls, for the argument layouts it passes,
    so that the first step costs a normal step (tests/solver/test_warmup.py).

    Through the same wrappers as the run: whole arrays (the whole-array pass), and
    chunks of ky rows (the block-wise pass) both as a narrower chunk sliced from
    its buffers and as the widest chunk, the whole buffer.
    """
    if not use_numba():
        return
    n = 4
    frame, keep, kv = _TinyFrame(n), np.ones(n, dtype=np.bool_), np.ones(n)
    band, kvec = (keep, keep, n), (kv, kv, kv)

    def spectral(*lead):
        return np.zeros(lead + (n, n, n), dtype=np.complex128)

    # whole-array pass: frame to Cartesian, products, advection
    velocity(spectral(), spectral(), frame, band, spectral(), spectral(), spectral())
    r = [np.ones((n, n, n)) for _ in range(6)]
    stresses(*r[:5])
    scalar_fluxes(*r)
    speed_limits(r[0], r[1], r[2], (1.0, 1.0, 1.0), None)
    out = spectral(3)
    momentum_advection([spectral() for _ in range(5)], None, 1.0, band, kvec, frame, out)
    scalar_advection([spectral() for _ in range(3)], None, 1.0, band, kvec, out[2])
    # block-wise pass: rows lo:hi of the state and of the tendency, chunk buffers
    buffers = [np.zeros((n, 2, n), dtype=np.complex128) for _ in range(8)]
    y = spectral(3)
    for width in (1, 2):
        chunks = [b[:, :width] for b in buffers]
        velocity_rows(y[0], y[1], frame, band, *chunks[:3], 0, width)
        advection_rows(chunks[:5], [(chunks[5:], 2)], 1.0, band, kvec, frame, out, 0, width)
    # diagnostics and the stage update
    z = spectral()
    z.flags.writeable = False  # diagnostics read the state through the step's read-only view
    small = np.zeros((2, 2, 2), dtype=np.complex128)
    r = np.ones((2, 2, 2))
    keep = np.ones(2, dtype=np.bool_)
    for has_T in (False, True):
        _sums_nb(z, z, z, has_T, frame.s, frame.c, frame.kh, frame.kz,
                 np.zeros(len(SUM_NAMES)), np.zeros(n))
    for last in (False, True):
        _stage_scalar_nb(small, small.copy(), small.copy(), r, keep, keep, 2, 0.1, 0.1, 0.1,
                         0.1, last)
        _stage_pair_nb(small, small.copy(), small.copy(), small.copy(), small.copy(),
                       small.copy(), r, r, r, r, keep, keep, 2, 0.1, 0.1, 0.1, 0.1, last)
        _follower_rhs_nb(small, small.copy(), small.copy(), small.copy(), r, r, 0.1, 0.1,
                         keep, keep, 2, 0.1, 0.1, 0.1, last)
    _follower_solve_nb(small, small.copy(), r, r, 0.1, 0.1, keep, keep, 2, 0.1)
