"""Compiled per-sample kernels (numba): kinematics, regressor, inverse dynamics and mass matrix.

Each kernel writes into arrays the caller allocates and loops over the samples of one chunk;
`ident.arm.dynamics` and `ident.arm.regressor` hold the friendly wrappers. Notation (body frames):
``w`` angular velocity, ``dw`` angular acceleration, ``a`` linear acceleration of the body-frame
origin with gravity entered as a base acceleration of ``-g``; ``R[k]`` maps body k to its parent,
``p[k]`` is body k's origin in the parent. Spatial vectors are ``[angular; linear]``.

Speed notes: helpers take whole scratch arrays and an index rather than row views, and are
inlined (``inline="always"``), because for a 7-joint arm the call and reference-count overhead
of views otherwise costs as much as the arithmetic. The regressor writes every entry of its
output once, row by row, so buffers are never cleared first.
"""

from __future__ import annotations

import os

import numba
import numpy as np
from numba import njit, prange

from ..errors import IdentError

_OPTS = dict(cache=True, nogil=True, fastmath=False)
_INLINE = dict(_OPTS, inline="always")


@njit(**_INLINE)
def _joint_transform(jtype, Rf, pf, ax, k, qk, R, p):
    """Placement R[k], p[k] of body k in its parent for joint position qk (revolute: rotation about ax[k]).

    Whole arrays and an index are passed rather than row views: views cost reference-count
    updates that dominate a kernel this small.
    """
    if jtype[k] == 0:
        c = np.cos(qk)
        s = np.sin(qk)
        v = 1.0 - c
        x, y, z = ax[k, 0], ax[k, 1], ax[k, 2]
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
            a0, a1, a2 = Rf[k, i, 0], Rf[k, i, 1], Rf[k, i, 2]
            R[k, i, 0] = a0 * r00 + a1 * r10 + a2 * r20
            R[k, i, 1] = a0 * r01 + a1 * r11 + a2 * r21
            R[k, i, 2] = a0 * r02 + a1 * r12 + a2 * r22
            p[k, i] = pf[k, i]
    else:
        for i in range(3):
            R[k, i, 0] = Rf[k, i, 0]
            R[k, i, 1] = Rf[k, i, 1]
            R[k, i, 2] = Rf[k, i, 2]
            p[k, i] = pf[k, i] + qk * (Rf[k, i, 0] * ax[k, 0] + Rf[k, i, 1] * ax[k, 1] + Rf[k, i, 2] * ax[k, 2])


@njit(**_INLINE)
def _forward(q, dq, ddq, s, parent, jtype, Rf, pf, ax, a0, R, p, w, dw, a):
    """Forward recursion for sample s of (N, n) q, dq, ddq: fills R, p (placements) and w, dw, a (body-frame motion)."""
    n = q.shape[1]
    for k in range(n):
        _joint_transform(jtype, Rf, pf, ax, k, q[s, k], R, p)
        par = parent[k]
        pk0, pk1, pk2 = p[k, 0], p[k, 1], p[k, 2]
        if par < 0:
            wp0 = wp1 = wp2 = 0.0
            dwp0 = dwp1 = dwp2 = 0.0
            ap0, ap1, ap2 = a0[0], a0[1], a0[2]
        else:
            wp0, wp1, wp2 = w[par, 0], w[par, 1], w[par, 2]
            dwp0, dwp1, dwp2 = dw[par, 0], dw[par, 1], dw[par, 2]
            ap0, ap1, ap2 = a[par, 0], a[par, 1], a[par, 2]
        # acceleration of the new origin in the parent frame: a_p + dw_p x p + w_p x (w_p x p)
        c0 = wp1 * pk2 - wp2 * pk1
        c1 = wp2 * pk0 - wp0 * pk2
        c2 = wp0 * pk1 - wp1 * pk0
        t0 = ap0 + dwp1 * pk2 - dwp2 * pk1 + wp1 * c2 - wp2 * c1
        t1 = ap1 + dwp2 * pk0 - dwp0 * pk2 + wp2 * c0 - wp0 * c2
        t2 = ap2 + dwp0 * pk1 - dwp1 * pk0 + wp0 * c1 - wp1 * c0
        for i in range(3):  # rotate into the body frame (R^T)
            r0, r1, r2 = R[k, 0, i], R[k, 1, i], R[k, 2, i]
            a[k, i] = r0 * t0 + r1 * t1 + r2 * t2
            w[k, i] = r0 * wp0 + r1 * wp1 + r2 * wp2
            dw[k, i] = r0 * dwp0 + r1 * dwp1 + r2 * dwp2
        z0, z1, z2 = ax[k, 0], ax[k, 1], ax[k, 2]
        qd = dq[s, k]
        qdd = ddq[s, k]
        # (R^T w_p) x z, used by both joint kinds
        u0 = w[k, 1] * z2 - w[k, 2] * z1
        u1 = w[k, 2] * z0 - w[k, 0] * z2
        u2 = w[k, 0] * z1 - w[k, 1] * z0
        if jtype[k] == 0:
            # dw = R^T dw_p + (R^T w_p) x z qd + z qdd ; w = R^T w_p + z qd
            dw[k, 0] += u0 * qd + z0 * qdd
            dw[k, 1] += u1 * qd + z1 * qdd
            dw[k, 2] += u2 * qd + z2 * qdd
            w[k, 0] += z0 * qd
            w[k, 1] += z1 * qd
            w[k, 2] += z2 * qd
        else:
            # a += 2 w x (z qd) + z qdd
            a[k, 0] += 2.0 * u0 * qd + z0 * qdd
            a[k, 1] += 2.0 * u1 * qd + z1 * qdd
            a[k, 2] += 2.0 * u2 * qd + z2 * qdd


#: Velocity scales of the low-speed shape codes 6..8 (the same as ident.arm.model.LOW_SPEED_SCALES).
_FL_SCALES = (0.005, 0.02, 0.08)


@njit(**_INLINE)
def _term_value(code, v, a):
    """Regressor column of joint term `code` (0 fv, 1 fc, 2 fo, 3 ia, 4 fcp, 5 fcn, 6-8 fl1-fl3) at velocity v, acceleration a."""
    if code == 0:
        return v
    if code == 1:
        return 1.0 if v > 0.0 else (-1.0 if v < 0.0 else 0.0)
    if code == 2:
        return 1.0
    if code == 3:
        return a
    if code == 4:
        return 1.0 if v > 0.0 else 0.0
    if code == 5:
        return -1.0 if v < 0.0 else 0.0
    return np.tanh(v / _FL_SCALES[code - 6])


@njit(**_INLINE)
def _regressor_sample(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, terms, Y, R, p, w, dw, a, S, BC):
    """Regressor of sample s into Y[s] (n, p); R, p, w, dw, a, S, BC are the caller's scratch arrays.

    Every entry of Y is written exactly once and row by row (blocks of bodies outside joint j's
    subtree get zeros), so the caller need not clear the buffer and the stores stream.
    """
    _regressor_row(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, terms, Y, s, R, p, w, dw, a, S, BC)


@njit(**_INLINE)
def _regressor_row(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, terms, Y, r, R, p, w, dw, a, S, BC):
    """Regressor of sample s of q, dq, ddq into row r of Y (Y[r] is (n, p)); see :func:`_regressor_sample`."""
    n = q.shape[1]
    nt = terms.shape[0]
    _motion_blocks(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, R, p, w, dw, a, S, BC)
    base = 10 * n
    for j in range(n):
        for k in range(n):
            col = 10 * k
            if k < j or not anc[k, j]:
                for c in range(10):
                    Y[r, j, col + c] = 0.0
                continue
            e0, e1, e2, e3, e4, e5, e6, e7, e8, e9 = _body_entries(a, S, BC, j, k)
            Y[r, j, col] = e0
            Y[r, j, col + 1] = e1
            Y[r, j, col + 2] = e2
            Y[r, j, col + 3] = e3
            Y[r, j, col + 4] = e4
            Y[r, j, col + 5] = e5
            Y[r, j, col + 6] = e6
            Y[r, j, col + 7] = e7
            Y[r, j, col + 8] = e8
            Y[r, j, col + 9] = e9
        if nt > 0:
            for c in range(base, base + n * nt):
                Y[r, j, c] = 0.0
            for t in range(nt):
                code = terms[t]
                v = _term_value(code, dq[s, j], ddq[s, j])
                Y[r, j, base + nt * j + t] = v


@njit(**_INLINE)
def _body_entries(a, S, BC, j, k):
    """Joint j's 10 regressor entries for body k's parameters: s_jk . (6x10 wrench block of body k)."""
    ak0, ak1, ak2 = a[k, 0], a[k, 1], a[k, 2]
    sa0, sa1, sa2 = S[k, j, 0], S[k, j, 1], S[k, j, 2]
    sl0, sl1, sl2 = S[k, j, 3], S[k, j, 4], S[k, j, 5]
    return (
        sl0 * ak0 + sl1 * ak1 + sl2 * ak2,
        # moment h x a seen by sa: h . (a x sa)
        sl0 * BC[k, 0] + sl1 * BC[k, 3] + sl2 * BC[k, 6] + ak1 * sa2 - ak2 * sa1,
        sl0 * BC[k, 1] + sl1 * BC[k, 4] + sl2 * BC[k, 7] + ak2 * sa0 - ak0 * sa2,
        sl0 * BC[k, 2] + sl1 * BC[k, 5] + sl2 * BC[k, 8] + ak0 * sa1 - ak1 * sa0,
        sa0 * BC[k, 9] + sa1 * BC[k, 15] + sa2 * BC[k, 21],
        sa0 * BC[k, 10] + sa1 * BC[k, 16] + sa2 * BC[k, 22],
        sa0 * BC[k, 11] + sa1 * BC[k, 17] + sa2 * BC[k, 23],
        sa0 * BC[k, 12] + sa1 * BC[k, 18] + sa2 * BC[k, 24],
        sa0 * BC[k, 13] + sa1 * BC[k, 19] + sa2 * BC[k, 25],
        sa0 * BC[k, 14] + sa1 * BC[k, 20] + sa2 * BC[k, 26],
    )


@njit(**_INLINE)
def _motion_blocks(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, R, p, w, dw, a, S, BC):
    """Per-sample pieces of the regressor: forward recursion (R, p, w, dw, a), every ancestor's
    joint axis in each body frame ``S[k, j]`` (6,), and the force/moment maps ``BC[k]`` (27,)."""
    n = q.shape[1]
    _forward(q, dq, ddq, s, parent, jtype, Rf, pf, ax, a0, R, p, w, dw, a)
    for k in range(n):
        # joint axes of every ancestor, carried into frame k: s_k = X_k s_parent
        par = parent[k]
        pk0, pk1, pk2 = p[k, 0], p[k, 1], p[k, 2]
        for j in range(k):
            if anc[k, j]:
                sw0, sw1, sw2 = S[par, j, 0], S[par, j, 1], S[par, j, 2]
                v0 = S[par, j, 3] + sw1 * pk2 - sw2 * pk1
                v1 = S[par, j, 4] + sw2 * pk0 - sw0 * pk2
                v2 = S[par, j, 5] + sw0 * pk1 - sw1 * pk0
                for i in range(3):
                    r0, r1, r2 = R[k, 0, i], R[k, 1, i], R[k, 2, i]
                    S[k, j, i] = r0 * sw0 + r1 * sw1 + r2 * sw2
                    S[k, j, 3 + i] = r0 * v0 + r1 * v1 + r2 * v2
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
        # B = [dw]x + [w]x[w]x  (force from the first moment), row-major in BC[k, 0:9]
        BC[k, 0] = -(w1 * w1 + w2 * w2)
        BC[k, 1] = w0 * w1 - d2
        BC[k, 2] = w0 * w2 + d1
        BC[k, 3] = w0 * w1 + d2
        BC[k, 4] = -(w0 * w0 + w2 * w2)
        BC[k, 5] = w1 * w2 - d0
        BC[k, 6] = w0 * w2 - d1
        BC[k, 7] = w1 * w2 + d0
        BC[k, 8] = -(w0 * w0 + w1 * w1)
        # C = L(dw) + [w]x L(w)  (moment from the inertia entries xx xy xz yy yz zz), BC[k, 9:27]
        BC[k, 9] = d0
        BC[k, 10] = d1 - w2 * w0
        BC[k, 11] = d2 + w1 * w0
        BC[k, 12] = -w2 * w1
        BC[k, 13] = w1 * w1 - w2 * w2
        BC[k, 14] = w1 * w2
        BC[k, 15] = w2 * w0
        BC[k, 16] = d0 + w2 * w1
        BC[k, 17] = w2 * w2 - w0 * w0
        BC[k, 18] = d1
        BC[k, 19] = d2 - w0 * w1
        BC[k, 20] = -w0 * w2
        BC[k, 21] = -w1 * w0
        BC[k, 22] = w0 * w0 - w1 * w1
        BC[k, 23] = d0 - w1 * w2
        BC[k, 24] = w0 * w1
        BC[k, 25] = d1 + w0 * w2
        BC[k, 26] = d2


@njit(**_OPTS)
def _regressor_block(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out, start, stop):
    """Regressor of samples start..stop-1 with scratch arrays of its own (one block per thread)."""
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    w = np.empty((n, 3))
    dw = np.empty((n, 3))
    a = np.empty((n, 3))
    S = np.empty((n, n, 6))
    BC = np.empty((n, 27))
    for s in range(start, stop):
        _regressor_sample(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, terms, out, R, p, w, dw, a, S, BC)


#: Samples per parallel work item: large enough to amortise the scratch allocation, small
#: enough to balance the threads on a chunk of a few thousand samples.
_BLOCK = 64


@njit(**_OPTS)
def _regressor_serial(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out):
    """The regressor of every sample on the calling thread (see :func:`regressor_chunk`)."""
    _regressor_block(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out, 0, q.shape[0])


@njit(parallel=True, **_OPTS)
def _regressor_parallel(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out):
    """The regressor with blocks of samples spread over numba's threads (see :func:`regressor_chunk`)."""
    N = q.shape[0]
    nb = (N + _BLOCK - 1) // _BLOCK
    for b in prange(nb):
        start = b * _BLOCK
        stop = min(N, start + _BLOCK)
        _regressor_block(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out, start, stop)


_THREADING = "auto"
_PARENT_PID = os.getpid()


def _after_fork_in_child() -> None:
    # numba's OpenMP pool does not survive fork(): a child that enters a parallel region is
    # terminated. Forked children (multiprocessing on Linux) therefore stay on one thread.
    global _THREADING
    _THREADING = "off"


os.register_at_fork(after_in_child=_after_fork_in_child)


def set_threading(mode: str) -> str:
    """Choose how the regressor kernel uses numba's threads; returns the previous mode.

    ``"auto"`` (default): threads only when :func:`use_threads` finds idle cores; ``"on"``: always
    for chunks of 8 blocks or more; ``"off"``: never. The thread count itself is numba's
    (``NUMBA_NUM_THREADS`` or ``numba.set_num_threads``). Results are identical in every mode.
    """
    global _THREADING
    if mode not in ("auto", "on", "off"):
        raise IdentError(f"threading mode: expected 'auto', 'on' or 'off', got {mode!r}")
    if os.getpid() != _PARENT_PID:
        mode = "off"  # see _after_fork_in_child
    previous, _THREADING = _THREADING, mode
    return previous


def use_threads(N: int) -> bool:
    """Whether a chunk of N samples goes to numba's thread pool.

    Only when numba has more than one thread, the chunk has at least 8 blocks and, in ``"auto"``
    mode, the 1-minute load average leaves a core idle: on a busy machine the join waits for a
    descheduled thread and one thread is faster (measured on a shared 2-core machine).
    """
    if _THREADING == "off" or numba.get_num_threads() < 2 or N < 8 * _BLOCK:
        return False
    if _THREADING == "on":
        return True
    try:
        load = os.getloadavg()[0]
    except OSError:
        return True
    return load < (os.cpu_count() or 1) - 0.5


def regressor_chunk(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out):
    """Fill ``out`` (N, n, p) with the regressor of N samples; q, dq, ddq are (N, n).

    Columns: 10 inertial columns per body ``[m, mx, my, mz, xx, xy, xz, yy, yz, zz]``, then per
    joint the selected terms in the order of ``terms`` (int codes: position in ident.arm.model.JOINT_TERMS).
    Joint j's row of body k's block is s_jk . (6x10 wrench block of body k), with s_jk joint j's
    motion axis expressed in body k's frame. Samples are independent: blocks of ``_BLOCK``
    samples run on numba's threads when :func:`use_threads` says so; the result is the same.
    """
    kernel = _regressor_parallel if use_threads(q.shape[0]) else _regressor_serial
    kernel(q, dq, ddq, parent, jtype, Rf, pf, ax, anc, a0, terms, out)


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
        _forward(q, dq, ddq, s, parent, jtype, Rf, pf, ax, a0, R, p, w, dw, a)
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
                _wrench_to_parent(R, p, k, f, m_, par)


@njit(**_INLINE)
def _wrench_to_parent(R, p, k, f, nm, par):
    """Add body k's wrench (force f[k], moment nm[k] at its origin, body frame) to row `par` of f, nm."""
    f0, f1, f2 = f[k, 0], f[k, 1], f[k, 2]
    n0, n1, n2 = nm[k, 0], nm[k, 1], nm[k, 2]
    g0 = R[k, 0, 0] * f0 + R[k, 0, 1] * f1 + R[k, 0, 2] * f2
    g1 = R[k, 1, 0] * f0 + R[k, 1, 1] * f1 + R[k, 1, 2] * f2
    g2 = R[k, 2, 0] * f0 + R[k, 2, 1] * f1 + R[k, 2, 2] * f2
    p0, p1, p2 = p[k, 0], p[k, 1], p[k, 2]
    f[par, 0] += g0
    f[par, 1] += g1
    f[par, 2] += g2
    nm[par, 0] += R[k, 0, 0] * n0 + R[k, 0, 1] * n1 + R[k, 0, 2] * n2 + p1 * g2 - p2 * g1
    nm[par, 1] += R[k, 1, 0] * n0 + R[k, 1, 1] * n1 + R[k, 1, 2] * n2 + p2 * g0 - p0 * g2
    nm[par, 2] += R[k, 2, 0] * n0 + R[k, 2, 1] * n1 + R[k, 2, 2] * n2 + p0 * g1 - p1 * g0


@njit(**_OPTS)
def crba_chunk(q, parent, jtype, Rf, pf, ax, params, out):
    """Composite-rigid-body algorithm: out (N, n, n) = M(q) for ``params`` (n, 10)."""
    N = q.shape[0]
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    Ic = np.empty((n, 10))
    # the wrench F = Ic_i S_i being carried towards the base (one row, indexed like the others)
    f = np.empty((1, 3))
    m_ = np.empty((1, 3))
    for s in range(N):
        for k in range(n):
            _joint_transform(jtype, Rf, pf, ax, k, q[s, k], R, p)
            for c in range(10):
                Ic[k, c] = params[k, c]
        for k in range(n - 1, -1, -1):
            par = parent[k]
            if par >= 0:
                _add_params_to_parent(R, p, k, Ic, par)
        for i in range(n):
            for j in range(n):
                out[s, i, j] = 0.0  # bodies on different branches do not couple
        for i in range(n):
            # F = Ic_i S_i, spatial force [n; f] at body i's origin
            mass = Ic[i, 0]
            h0, h1, h2 = Ic[i, 1], Ic[i, 2], Ic[i, 3]
            xx, xy, xz, yy, yz, zz = Ic[i, 4], Ic[i, 5], Ic[i, 6], Ic[i, 7], Ic[i, 8], Ic[i, 9]
            z0, z1, z2 = ax[i, 0], ax[i, 1], ax[i, 2]
            if jtype[i] == 0:
                # n = I z ; f = z x h
                m_[0, 0] = xx * z0 + xy * z1 + xz * z2
                m_[0, 1] = xy * z0 + yy * z1 + yz * z2
                m_[0, 2] = xz * z0 + yz * z1 + zz * z2
                f[0, 0] = z1 * h2 - z2 * h1
                f[0, 1] = z2 * h0 - z0 * h2
                f[0, 2] = z0 * h1 - z1 * h0
                out[s, i, i] = z0 * m_[0, 0] + z1 * m_[0, 1] + z2 * m_[0, 2]
            else:
                # n = h x z ; f = m z
                m_[0, 0] = h1 * z2 - h2 * z1
                m_[0, 1] = h2 * z0 - h0 * z2
                m_[0, 2] = h0 * z1 - h1 * z0
                f[0, 0] = mass * z0
                f[0, 1] = mass * z1
                f[0, 2] = mass * z2
                out[s, i, i] = z0 * f[0, 0] + z1 * f[0, 1] + z2 * f[0, 2]
            j = i
            while parent[j] >= 0:
                _carry(R, p, j, f, m_)
                j = parent[j]
                if jtype[j] == 0:
                    v = ax[j, 0] * m_[0, 0] + ax[j, 1] * m_[0, 1] + ax[j, 2] * m_[0, 2]
                else:
                    v = ax[j, 0] * f[0, 0] + ax[j, 1] * f[0, 1] + ax[j, 2] * f[0, 2]
                out[s, i, j] = v
                out[s, j, i] = v


@njit(**_INLINE)
def _carry(R, p, j, f, nm):
    """Express the wrench in row 0 of f, nm (body j's frame) in j's parent frame, in place."""
    f0, f1, f2 = f[0, 0], f[0, 1], f[0, 2]
    n0, n1, n2 = nm[0, 0], nm[0, 1], nm[0, 2]
    g0 = R[j, 0, 0] * f0 + R[j, 0, 1] * f1 + R[j, 0, 2] * f2
    g1 = R[j, 1, 0] * f0 + R[j, 1, 1] * f1 + R[j, 1, 2] * f2
    g2 = R[j, 2, 0] * f0 + R[j, 2, 1] * f1 + R[j, 2, 2] * f2
    p0, p1, p2 = p[j, 0], p[j, 1], p[j, 2]
    f[0, 0] = g0
    f[0, 1] = g1
    f[0, 2] = g2
    nm[0, 0] = R[j, 0, 0] * n0 + R[j, 0, 1] * n1 + R[j, 0, 2] * n2 + p1 * g2 - p2 * g1
    nm[0, 1] = R[j, 1, 0] * n0 + R[j, 1, 1] * n1 + R[j, 1, 2] * n2 + p2 * g0 - p0 * g2
    nm[0, 2] = R[j, 2, 0] * n0 + R[j, 2, 1] * n1 + R[j, 2, 2] * n2 + p0 * g1 - p1 * g0


@njit(**_INLINE)
def _add_params_to_parent(R, p, k, Ic, par):
    """Ic[par] += Ic[k] expressed in the parent frame (parallel-axis for the first and second moments).

    I_par += R I R^T - [p]x[Rh]x - [Rh]x[p]x - m [p]x[p]x, with -[a]x[b]x = (a.b) E - b a^T.
    """
    m = Ic[k, 0]
    sx, sy, sz = Ic[k, 1], Ic[k, 2], Ic[k, 3]
    h0 = R[k, 0, 0] * sx + R[k, 0, 1] * sy + R[k, 0, 2] * sz
    h1 = R[k, 1, 0] * sx + R[k, 1, 1] * sy + R[k, 1, 2] * sz
    h2 = R[k, 2, 0] * sx + R[k, 2, 1] * sy + R[k, 2, 2] * sz
    p0, p1, p2 = p[k, 0], p[k, 1], p[k, 2]
    ph = p0 * h0 + p1 * h1 + p2 * h2
    pp = p0 * p0 + p1 * p1 + p2 * p2
    xx, xy, xz, yy, yz, zz = Ic[k, 4], Ic[k, 5], Ic[k, 6], Ic[k, 7], Ic[k, 8], Ic[k, 9]
    # T = R I (3x3), then the entries of T R^T
    t00 = R[k, 0, 0] * xx + R[k, 0, 1] * xy + R[k, 0, 2] * xz
    t01 = R[k, 0, 0] * xy + R[k, 0, 1] * yy + R[k, 0, 2] * yz
    t02 = R[k, 0, 0] * xz + R[k, 0, 1] * yz + R[k, 0, 2] * zz
    t10 = R[k, 1, 0] * xx + R[k, 1, 1] * xy + R[k, 1, 2] * xz
    t11 = R[k, 1, 0] * xy + R[k, 1, 1] * yy + R[k, 1, 2] * yz
    t12 = R[k, 1, 0] * xz + R[k, 1, 1] * yz + R[k, 1, 2] * zz
    t20 = R[k, 2, 0] * xx + R[k, 2, 1] * xy + R[k, 2, 2] * xz
    t21 = R[k, 2, 0] * xy + R[k, 2, 1] * yy + R[k, 2, 2] * yz
    t22 = R[k, 2, 0] * xz + R[k, 2, 1] * yz + R[k, 2, 2] * zz
    i00 = t00 * R[k, 0, 0] + t01 * R[k, 0, 1] + t02 * R[k, 0, 2]
    i01 = t00 * R[k, 1, 0] + t01 * R[k, 1, 1] + t02 * R[k, 1, 2]
    i02 = t00 * R[k, 2, 0] + t01 * R[k, 2, 1] + t02 * R[k, 2, 2]
    i11 = t10 * R[k, 1, 0] + t11 * R[k, 1, 1] + t12 * R[k, 1, 2]
    i12 = t10 * R[k, 2, 0] + t11 * R[k, 2, 1] + t12 * R[k, 2, 2]
    i22 = t20 * R[k, 2, 0] + t21 * R[k, 2, 1] + t22 * R[k, 2, 2]
    Ic[par, 0] += m
    Ic[par, 1] += h0 + m * p0
    Ic[par, 2] += h1 + m * p1
    Ic[par, 3] += h2 + m * p2
    Ic[par, 4] += i00 + (2.0 * ph - 2.0 * h0 * p0) + m * (pp - p0 * p0)
    Ic[par, 5] += i01 - (h0 * p1 + p0 * h1) - m * p0 * p1
    Ic[par, 6] += i02 - (h0 * p2 + p0 * h2) - m * p0 * p2
    Ic[par, 7] += i11 + (2.0 * ph - 2.0 * h1 * p1) + m * (pp - p1 * p1)
    Ic[par, 8] += i12 - (h1 * p2 + p1 * h2) - m * p1 * p2
    Ic[par, 9] += i22 + (2.0 * ph - 2.0 * h2 * p2) + m * (pp - p2 * p2)


@njit(**_OPTS)
def poses_chunk(q, parent, jtype, Rf, pf, ax, Rw, pw):
    """Forward kinematics: body orientations Rw (N, n, 3, 3) and origins pw (N, n, 3) in the base frame."""
    N = q.shape[0]
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    for s in range(N):
        for k in range(n):
            _joint_transform(jtype, Rf, pf, ax, k, q[s, k], R, p)
            par = parent[k]
            if par < 0:
                for i in range(3):
                    pw[s, k, i] = p[k, i]
                    for j in range(3):
                        Rw[s, k, i, j] = R[k, i, j]
            else:
                for i in range(3):
                    pw[s, k, i] = pw[s, par, i] + Rw[s, par, i, 0] * p[k, 0] + Rw[s, par, i, 1] * p[k, 1] + Rw[s, par, i, 2] * p[k, 2]
                    for j in range(3):
                        Rw[s, k, i, j] = Rw[s, par, i, 0] * R[k, 0, j] + Rw[s, par, i, 1] * R[k, 1, j] + Rw[s, par, i, 2] * R[k, 2, j]


@njit(**_OPTS)
def point_chunk(Rw, pw, body, local, anc, jtype, ax, x, J):
    """Position x (N, 3) and linear Jacobian J (N, 3, n) of the point `local` (3,) of body `body`
    from the poses of :func:`poses_chunk`; `anc` (n,) marks the joints that move the body. J's
    other columns are left as they are (the caller clears them)."""
    N = Rw.shape[0]
    n = anc.shape[0]
    for s in range(N):
        for i in range(3):
            x[s, i] = pw[s, body, i] + Rw[s, body, i, 0] * local[0] + Rw[s, body, i, 1] * local[1] + Rw[s, body, i, 2] * local[2]
        for j in range(n):
            if not anc[j]:
                continue
            z0 = Rw[s, j, 0, 0] * ax[j, 0] + Rw[s, j, 0, 1] * ax[j, 1] + Rw[s, j, 0, 2] * ax[j, 2]
            z1 = Rw[s, j, 1, 0] * ax[j, 0] + Rw[s, j, 1, 1] * ax[j, 1] + Rw[s, j, 1, 2] * ax[j, 2]
            z2 = Rw[s, j, 2, 0] * ax[j, 0] + Rw[s, j, 2, 1] * ax[j, 1] + Rw[s, j, 2, 2] * ax[j, 2]
            if jtype[j] != 0:
                J[s, 0, j] = z0
                J[s, 1, j] = z1
                J[s, 2, j] = z2
                continue
            r0, r1, r2 = x[s, 0] - pw[s, j, 0], x[s, 1] - pw[s, j, 1], x[s, 2] - pw[s, j, 2]
            J[s, 0, j] = z1 * r2 - z2 * r1
            J[s, 1, j] = z2 * r0 - z0 * r2
            J[s, 2, j] = z0 * r1 - z1 * r0
