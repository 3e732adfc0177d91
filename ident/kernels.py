"""Compiled per-sample kernels (numba): kinematics, regressor, inverse dynamics and mass matrix.

Each kernel writes into arrays the caller allocates and loops over the samples of one chunk;
`ident.dynamics` and `ident.regressor` hold the friendly wrappers. Notation (body frames):
``w`` angular velocity, ``dw`` angular acceleration, ``a`` linear acceleration of the body-frame
origin with gravity entered as a base acceleration of ``-g``; ``R[k]`` maps body k to its parent,
``p[k]`` is body k's origin in the parent. Spatial vectors are ``[angular; linear]``.
"""

from __future__ import annotations

import numpy as np
from numba import njit

_OPTS = dict(cache=True, nogil=True, fastmath=False)


@njit(**_OPTS)
def _joint_transform(jt, Rf, pf, ax, qk, R, p):
    """Placement (R, p) of a body in its parent for joint position qk (revolute: rotation about ax)."""
    if jt == 0:
        c = np.cos(qk)
        s = np.sin(qk)
        v = 1.0 - c
        x, y, z = ax[0], ax[1], ax[2]
        r00 = c + x * x * v
        r01 = x * y * v - z * s
        r02 = x * z * v + y * s
        r10 = y * x * v + z * s
        r11 = c + y * y * v
        r12 = y * z * v - x * s
        r20 = z * x * v - y * s
        r21 = z * y * v + x * s
        r22 = c + z * z * v
        for i in range(3):
            a0, a1, a2 = Rf[i, 0], Rf[i, 1], Rf[i, 2]
            R[i, 0] = a0 * r00 + a1 * r10 + a2 * r20
            R[i, 1] = a0 * r01 + a1 * r11 + a2 * r21
            R[i, 2] = a0 * r02 + a1 * r12 + a2 * r22
            p[i] = pf[i]
    else:
        for i in range(3):
            R[i, 0] = Rf[i, 0]
            R[i, 1] = Rf[i, 1]
            R[i, 2] = Rf[i, 2]
            p[i] = pf[i] + qk * (Rf[i, 0] * ax[0] + Rf[i, 1] * ax[1] + Rf[i, 2] * ax[2])


@njit(**_OPTS)
def _forward(q, dq, ddq, parent, jtype, Rf, pf, ax, a0, R, p, w, dw, a):
    """Forward recursion for one sample: fills R, p (placements) and w, dw, a (body-frame motion)."""
    n = q.shape[0]
    t = np.empty(3)
    u = np.empty(3)
    for k in range(n):
        _joint_transform(jtype[k], Rf[k], pf[k], ax[k], q[k], R[k], p[k])
        par = parent[k]
        pk = p[k]
        if par < 0:
            wp0 = wp1 = wp2 = 0.0
            dwp0 = dwp1 = dwp2 = 0.0
            ap0, ap1, ap2 = a0[0], a0[1], a0[2]
        else:
            wp0, wp1, wp2 = w[par, 0], w[par, 1], w[par, 2]
            dwp0, dwp1, dwp2 = dw[par, 0], dw[par, 1], dw[par, 2]
            ap0, ap1, ap2 = a[par, 0], a[par, 1], a[par, 2]
        # acceleration of the new origin in the parent frame: a_p + dw_p x p + w_p x (w_p x p)
        c0 = wp1 * pk[2] - wp2 * pk[1]
        c1 = wp2 * pk[0] - wp0 * pk[2]
        c2 = wp0 * pk[1] - wp1 * pk[0]
        t[0] = ap0 + dwp1 * pk[2] - dwp2 * pk[1] + wp1 * c2 - wp2 * c1
        t[1] = ap1 + dwp2 * pk[0] - dwp0 * pk[2] + wp2 * c0 - wp0 * c2
        t[2] = ap2 + dwp0 * pk[1] - dwp1 * pk[0] + wp0 * c1 - wp1 * c0
        Rk = R[k]
        for i in range(3):  # rotate into the body frame (R^T)
            a[k, i] = Rk[0, i] * t[0] + Rk[1, i] * t[1] + Rk[2, i] * t[2]
            w[k, i] = Rk[0, i] * wp0 + Rk[1, i] * wp1 + Rk[2, i] * wp2
            dw[k, i] = Rk[0, i] * dwp0 + Rk[1, i] * dwp1 + Rk[2, i] * dwp2
        z0, z1, z2 = ax[k, 0], ax[k, 1], ax[k, 2]
        qd = dq[k]
        qdd = ddq[k]
        if jtype[k] == 0:
            # dw = R^T dw_p + (R^T w_p) x z qd + z qdd ; w = R^T w_p + z qd
            u[0] = w[k, 1] * z2 - w[k, 2] * z1
            u[1] = w[k, 2] * z0 - w[k, 0] * z2
            u[2] = w[k, 0] * z1 - w[k, 1] * z0
            dw[k, 0] += u[0] * qd + z0 * qdd
            dw[k, 1] += u[1] * qd + z1 * qdd
            dw[k, 2] += u[2] * qd + z2 * qdd
            w[k, 0] += z0 * qd
            w[k, 1] += z1 * qd
            w[k, 2] += z2 * qd
        else:
            # a += 2 w x (z qd) + z qdd
            u[0] = w[k, 1] * z2 - w[k, 2] * z1
            u[1] = w[k, 2] * z0 - w[k, 0] * z2
            u[2] = w[k, 0] * z1 - w[k, 1] * z0
            a[k, 0] += 2.0 * u[0] * qd + z0 * qdd
            a[k, 1] += 2.0 * u[1] * qd + z1 * qdd
            a[k, 2] += 2.0 * u[2] * qd + z2 * qdd


@njit(**_OPTS)
def regressor_chunk(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out):
    """Fill ``out`` (N, n, p) with the regressor of N samples; q, dq, ddq are (N, n).

    Columns: 10 inertial columns per body ``[m, mx, my, mz, xx, xy, xz, yy, yz, zz]``, then per
    joint the selected terms in the order of ``terms`` (int codes 0 fv, 1 fc, 2 fo, 3 ia).
    Joint j's row of body k's block is s_jk . (6x10 wrench block of body k), with s_jk joint j's
    motion axis expressed in body k's frame.
    """
    N = q.shape[0]
    n = q.shape[1]
    nt = terms.shape[0]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    w = np.empty((n, 3))
    dw = np.empty((n, 3))
    a = np.empty((n, 3))
    S = np.empty((n, n, 6))
    B = np.empty((3, 3))
    C = np.empty((3, 6))
    for s in range(N):
        _forward(q[s], dq[s], ddq[s], parent, jtype, Rf, pf, ax, a0, R, p, w, dw, a)
        Y = out[s]
        Y[:, :] = 0.0
        for k in range(n):
            # joint axes of every ancestor, carried into frame k
            par = parent[k]
            Rk = R[k]
            pk = p[k]
            for j in range(k):
                if anc[k, j]:
                    sw0, sw1, sw2 = S[par, j, 0], S[par, j, 1], S[par, j, 2]
                    v0 = S[par, j, 3] + sw1 * pk[2] - sw2 * pk[1]
                    v1 = S[par, j, 4] + sw2 * pk[0] - sw0 * pk[2]
                    v2 = S[par, j, 5] + sw0 * pk[1] - sw1 * pk[0]
                    for i in range(3):
                        S[k, j, i] = Rk[0, i] * sw0 + Rk[1, i] * sw1 + Rk[2, i] * sw2
                        S[k, j, 3 + i] = Rk[0, i] * v0 + Rk[1, i] * v1 + Rk[2, i] * v2
            if jtype[k] == 0:
                for i in range(3):
                    S[k, k, i] = ax[k, i]
                    S[k, k, 3 + i] = 0.0
            else:
                for i in range(3):
                    S[k, k, i] = 0.0
                    S[k, k, 3 + i] = ax[k, i]
            w0, w1, w2 = w[k, 0], w[k, 1], w[k, 2]
            d0, d1, d2 = dw[k, 0], dw[k, 1], dw[k, 2]
            ak0, ak1, ak2 = a[k, 0], a[k, 1], a[k, 2]
            # B = [dw]x + [w]x[w]x  (force from first moment)
            B[0, 0] = -(w1 * w1 + w2 * w2)
            B[0, 1] = w0 * w1 - d2
            B[0, 2] = w0 * w2 + d1
            B[1, 0] = w0 * w1 + d2
            B[1, 1] = -(w0 * w0 + w2 * w2)
            B[1, 2] = w1 * w2 - d0
            B[2, 0] = w0 * w2 - d1
            B[2, 1] = w1 * w2 + d0
            B[2, 2] = -(w0 * w0 + w1 * w1)
            # C = L(dw) + [w]x L(w)  (moment from inertia entries xx xy xz yy yz zz)
            C[0, 0] = d0
            C[0, 1] = d1 - w2 * w0
            C[0, 2] = d2 + w1 * w0
            C[0, 3] = -w2 * w1
            C[0, 4] = w1 * w1 - w2 * w2
            C[0, 5] = w1 * w2
            C[1, 0] = w2 * w0
            C[1, 1] = d0 + w2 * w1
            C[1, 2] = w2 * w2 - w0 * w0
            C[1, 3] = d1
            C[1, 4] = d2 - w0 * w1
            C[1, 5] = -w0 * w2
            C[2, 0] = -w1 * w0
            C[2, 1] = w0 * w0 - w1 * w1
            C[2, 2] = d0 - w1 * w2
            C[2, 3] = w0 * w1
            C[2, 4] = d1 + w0 * w2
            C[2, 5] = d2
            col = 10 * k
            for j in range(k + 1):
                if not anc[k, j]:
                    continue
                sa0, sa1, sa2 = S[k, j, 0], S[k, j, 1], S[k, j, 2]
                sl0, sl1, sl2 = S[k, j, 3], S[k, j, 4], S[k, j, 5]
                row = Y[j]
                row[col] = sl0 * ak0 + sl1 * ak1 + sl2 * ak2
                # moment h x a seen by sa: h . (a x sa)
                x0 = ak1 * sa2 - ak2 * sa1
                x1 = ak2 * sa0 - ak0 * sa2
                x2 = ak0 * sa1 - ak1 * sa0
                row[col + 1] = sl0 * B[0, 0] + sl1 * B[1, 0] + sl2 * B[2, 0] + x0
                row[col + 2] = sl0 * B[0, 1] + sl1 * B[1, 1] + sl2 * B[2, 1] + x1
                row[col + 3] = sl0 * B[0, 2] + sl1 * B[1, 2] + sl2 * B[2, 2] + x2
                for c in range(6):
                    row[col + 4 + c] = sa0 * C[0, c] + sa1 * C[1, c] + sa2 * C[2, c]
        base = 10 * n
        for j in range(n):
            for t in range(nt):
                code = terms[t]
                if code == 0:
                    v = dq[s, j]
                elif code == 1:
                    v = 1.0 if dq[s, j] > 0.0 else (-1.0 if dq[s, j] < 0.0 else 0.0)
                elif code == 2:
                    v = 1.0
                else:
                    v = ddq[s, j]
                Y[j, base + nt * j + t] = v


@njit(**_OPTS)
def rnea_chunk(q, dq, ddq, parent, jtype, Rf, pf, ax, a0, params, out):
    """Recursive Newton-Euler inverse dynamics: out (N, n) = M(q) ddq + c(q, dq) + g(q).

    ``params`` (n, 10) body inertial parameters; gravity enters through ``a0`` = -g (pass zeros
    to leave gravity out).
    """
    N = q.shape[0]
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    w = np.empty((n, 3))
    dw = np.empty((n, 3))
    a = np.empty((n, 3))
    f = np.empty((n, 3))
    m_ = np.empty((n, 3))
    for s in range(N):
        _forward(q[s], dq[s], ddq[s], parent, jtype, Rf, pf, ax, a0, R, p, w, dw, a)
        for k in range(n):
            mass = params[k, 0]
            h0, h1, h2 = params[k, 1], params[k, 2], params[k, 3]
            xx, xy, xz, yy, yz, zz = params[k, 4], params[k, 5], params[k, 6], params[k, 7], params[k, 8], params[k, 9]
            w0, w1, w2 = w[k, 0], w[k, 1], w[k, 2]
            d0, d1, d2 = dw[k, 0], dw[k, 1], dw[k, 2]
            a_0, a_1, a_2 = a[k, 0], a[k, 1], a[k, 2]
            # w x h
            c0 = w1 * h2 - w2 * h1
            c1 = w2 * h0 - w0 * h2
            c2 = w0 * h1 - w1 * h0
            # f = m a + dw x h + w x (w x h)
            f[k, 0] = mass * a_0 + d1 * h2 - d2 * h1 + w1 * c2 - w2 * c1
            f[k, 1] = mass * a_1 + d2 * h0 - d0 * h2 + w2 * c0 - w0 * c2
            f[k, 2] = mass * a_2 + d0 * h1 - d1 * h0 + w0 * c1 - w1 * c0
            # n = I dw + w x (I w) + h x a
            iw0 = xx * w0 + xy * w1 + xz * w2
            iw1 = xy * w0 + yy * w1 + yz * w2
            iw2 = xz * w0 + yz * w1 + zz * w2
            m_[k, 0] = xx * d0 + xy * d1 + xz * d2 + w1 * iw2 - w2 * iw1 + h1 * a_2 - h2 * a_1
            m_[k, 1] = xy * d0 + yy * d1 + yz * d2 + w2 * iw0 - w0 * iw2 + h2 * a_0 - h0 * a_2
            m_[k, 2] = xz * d0 + yz * d1 + zz * d2 + w0 * iw1 - w1 * iw0 + h0 * a_1 - h1 * a_0
        for k in range(n - 1, -1, -1):
            if jtype[k] == 0:
                out[s, k] = ax[k, 0] * m_[k, 0] + ax[k, 1] * m_[k, 1] + ax[k, 2] * m_[k, 2]
            else:
                out[s, k] = ax[k, 0] * f[k, 0] + ax[k, 1] * f[k, 1] + ax[k, 2] * f[k, 2]
            par = parent[k]
            if par >= 0:
                _wrench_to_parent(R[k], p[k], f[k], m_[k], f[par], m_[par])


@njit(**_OPTS)
def _wrench_to_parent(Rk, pk, fk, nk, fp, np_):
    """Add a body wrench (force fk, moment nk at its origin, body frame) to its parent's (fp, np_)."""
    g0 = Rk[0, 0] * fk[0] + Rk[0, 1] * fk[1] + Rk[0, 2] * fk[2]
    g1 = Rk[1, 0] * fk[0] + Rk[1, 1] * fk[1] + Rk[1, 2] * fk[2]
    g2 = Rk[2, 0] * fk[0] + Rk[2, 1] * fk[1] + Rk[2, 2] * fk[2]
    fp[0] += g0
    fp[1] += g1
    fp[2] += g2
    np_[0] += Rk[0, 0] * nk[0] + Rk[0, 1] * nk[1] + Rk[0, 2] * nk[2] + pk[1] * g2 - pk[2] * g1
    np_[1] += Rk[1, 0] * nk[0] + Rk[1, 1] * nk[1] + Rk[1, 2] * nk[2] + pk[2] * g0 - pk[0] * g2
    np_[2] += Rk[2, 0] * nk[0] + Rk[2, 1] * nk[1] + Rk[2, 2] * nk[2] + pk[0] * g1 - pk[1] * g0


@njit(**_OPTS)
def crba_chunk(q, parent, jtype, Rf, pf, ax, params, out):
    """Composite-rigid-body algorithm: out (N, n, n) = M(q) for ``params`` (n, 10)."""
    N = q.shape[0]
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    Ic = np.empty((n, 10))
    f = np.empty(3)
    m_ = np.empty(3)
    f2 = np.empty(3)
    m2 = np.empty(3)
    for s in range(N):
        for k in range(n):
            _joint_transform(jtype[k], Rf[k], pf[k], ax[k], q[s, k], R[k], p[k])
            for c in range(10):
                Ic[k, c] = params[k, c]
        for k in range(n - 1, -1, -1):
            par = parent[k]
            if par >= 0:
                _add_params_to_parent(R[k], p[k], Ic[k], Ic[par])
        M = out[s]
        M[:, :] = 0.0  # bodies on different branches do not couple
        for i in range(n):
            # F = Ic_i S_i, spatial force [n; f] at body i's origin
            mass = Ic[i, 0]
            h0, h1, h2 = Ic[i, 1], Ic[i, 2], Ic[i, 3]
            xx, xy, xz, yy, yz, zz = Ic[i, 4], Ic[i, 5], Ic[i, 6], Ic[i, 7], Ic[i, 8], Ic[i, 9]
            z0, z1, z2 = ax[i, 0], ax[i, 1], ax[i, 2]
            if jtype[i] == 0:
                # n = I z ; f = z x h
                m_[0] = xx * z0 + xy * z1 + xz * z2
                m_[1] = xy * z0 + yy * z1 + yz * z2
                m_[2] = xz * z0 + yz * z1 + zz * z2
                f[0] = z1 * h2 - z2 * h1
                f[1] = z2 * h0 - z0 * h2
                f[2] = z0 * h1 - z1 * h0
                M[i, i] = z0 * m_[0] + z1 * m_[1] + z2 * m_[2]
            else:
                # n = h x z ; f = m z
                m_[0] = h1 * z2 - h2 * z1
                m_[1] = h2 * z0 - h0 * z2
                m_[2] = h0 * z1 - h1 * z0
                f[0] = mass * z0
                f[1] = mass * z1
                f[2] = mass * z2
                M[i, i] = z0 * f[0] + z1 * f[1] + z2 * f[2]
            j = i
            while parent[j] >= 0:
                f2[:] = 0.0
                m2[:] = 0.0
                _wrench_to_parent(R[j], p[j], f, m_, f2, m2)
                f[:] = f2
                m_[:] = m2
                j = parent[j]
                if jtype[j] == 0:
                    v = ax[j, 0] * m_[0] + ax[j, 1] * m_[1] + ax[j, 2] * m_[2]
                else:
                    v = ax[j, 0] * f[0] + ax[j, 1] * f[1] + ax[j, 2] * f[2]
                M[i, j] = v
                M[j, i] = v


@njit(**_OPTS)
def _add_params_to_parent(Rk, pk, src, dst):
    """dst += src expressed in the parent frame (parallel-axis for the first and second moments)."""
    m = src[0]
    h = np.empty(3)
    for i in range(3):
        h[i] = Rk[i, 0] * src[1] + Rk[i, 1] * src[2] + Rk[i, 2] * src[3]
    I = np.empty((3, 3))
    I[0, 0] = src[4]
    I[0, 1] = src[5]
    I[0, 2] = src[6]
    I[1, 0] = src[5]
    I[1, 1] = src[7]
    I[1, 2] = src[8]
    I[2, 0] = src[6]
    I[2, 1] = src[8]
    I[2, 2] = src[9]
    RI = Rk @ I
    Ia = RI @ Rk.T
    # - [p]x[h]x - [h]x[p]x - m [p]x[p]x  with h already rotated
    ph = pk[0] * h[0] + pk[1] * h[1] + pk[2] * h[2]
    pp = pk[0] * pk[0] + pk[1] * pk[1] + pk[2] * pk[2]
    for i in range(3):
        for j in range(3):
            d = 1.0 if i == j else 0.0
            # -[a]x[b]x = (a.b) E - b a^T
            Ia[i, j] += (2.0 * ph * d - h[i] * pk[j] - pk[i] * h[j]) + m * (pp * d - pk[i] * pk[j])
    dst[0] += m
    for i in range(3):
        dst[1 + i] += h[i] + m * pk[i]
    dst[4] += Ia[0, 0]
    dst[5] += Ia[0, 1]
    dst[6] += Ia[0, 2]
    dst[7] += Ia[1, 1]
    dst[8] += Ia[1, 2]
    dst[9] += Ia[2, 2]


@njit(**_OPTS)
def poses_chunk(q, parent, jtype, Rf, pf, ax, Rw, pw):
    """Forward kinematics: body orientations Rw (N, n, 3, 3) and origins pw (N, n, 3) in the base frame."""
    N = q.shape[0]
    n = q.shape[1]
    R = np.empty((3, 3))
    p = np.empty(3)
    for s in range(N):
        for k in range(n):
            _joint_transform(jtype[k], Rf[k], pf[k], ax[k], q[s, k], R, p)
            par = parent[k]
            if par < 0:
                Rw[s, k] = R
                pw[s, k] = p
            else:
                Rw[s, k] = Rw[s, par] @ R
                for i in range(3):
                    pw[s, k, i] = pw[s, par, i] + Rw[s, par, i, 0] * p[0] + Rw[s, par, i, 1] * p[1] + Rw[s, par, i, 2] * p[2]
