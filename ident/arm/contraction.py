"""The regressor contracted with a weight array, and its exact gradient in the joint states.

For weights G (n, 10 n) per sample, ``F(q, q', q'') = sum_jp Y_jp(q, q', q'') G_jp`` over the
inertial columns of the regressor Y (:mod:`ident.arm.kernels`). An optimizer that moves a
trajectory through a criterion built on Y needs dF/dq, dF/dq' and dF/dq'' at every sample (the
chain rule of the criterion's gradient dC/dY = G). Differences would evaluate the regressor at
3 n + 1 states a sample; here one reverse (adjoint) sweep through the same recursions gives all
3 n derivatives at about the cost of three regressor evaluations, exactly.

The forward pass is the regressor kernel's (:func:`ident.arm.kernels._motion_blocks`): placements
R, p, body motion w, dw, a, the ancestors' joint axes S and the moment maps BC. The reverse pass
visits the same quantities in the opposite order, bodies from the tip to the base:

1. each body's regressor entries ``s . (6x10 wrench block)`` are bilinear in its axis s and its
   motion terms (a, BC), so their adjoints are products of G with the forward values;
2. BC is quadratic in w and linear in dw;
3. the axes are carried outward as ``S_k = X_k S_parent``, so their adjoints are carried inward;
4. the motion recursion (velocity, acceleration propagation) is differentiated the same way,
   and the joint placement's derivative in q closes the chain (``dR/dq = R [z]x`` for a revolute
   joint, ``dp/dq = R_fix z`` for a prismatic one).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from ..errors import IdentError
from .kernels import _BLOCK, _OPTS, _motion_blocks, use_threads
from .model import Robot, kernel_arrays


@njit(**_OPTS)
def _contract_block(q, dq, ddq, G, parent, jtype, Rf, pf, ax, anc, a0, F, gq, gdq, gddq, start, stop):
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    w = np.empty((n, 3))
    dw = np.empty((n, 3))
    a = np.empty((n, 3))
    S = np.empty((n, n, 6))
    BC = np.empty((n, 27))
    Aa = np.empty((n, 3))
    Aw = np.empty((n, 3))
    Adw = np.empty((n, 3))
    AB = np.empty((n, 27))
    AS = np.empty((n, n, 6))
    AR = np.empty((n, 3, 3))
    Ap = np.empty((n, 3))
    for s in range(start, stop):
        _motion_blocks(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, R, p, w, dw, a, S, BC)
        Aa[:] = 0.0
        Aw[:] = 0.0
        Adw[:] = 0.0
        AB[:] = 0.0
        AS[:] = 0.0
        AR[:] = 0.0
        Ap[:] = 0.0
        f = 0.0
        # 1. entries: F_kj = sl . (g0 a + B h) + a . (sa x h) + sa . (C gI)
        for k in range(n):
            a_0, a_1, a_2 = a[k, 0], a[k, 1], a[k, 2]
            for j in range(k + 1):
                if not anc[k, j]:
                    continue
                col = 10 * k
                g0 = G[s, j, col]
                h0, h1, h2 = G[s, j, col + 1], G[s, j, col + 2], G[s, j, col + 3]
                sa0, sa1, sa2 = S[k, j, 0], S[k, j, 1], S[k, j, 2]
                sl0, sl1, sl2 = S[k, j, 3], S[k, j, 4], S[k, j, 5]
                bh0 = BC[k, 0] * h0 + BC[k, 1] * h1 + BC[k, 2] * h2
                bh1 = BC[k, 3] * h0 + BC[k, 4] * h1 + BC[k, 5] * h2
                bh2 = BC[k, 6] * h0 + BC[k, 7] * h1 + BC[k, 8] * h2
                cg0 = 0.0
                cg1 = 0.0
                cg2 = 0.0
                for c in range(6):
                    gi = G[s, j, col + 4 + c]
                    cg0 += BC[k, 9 + c] * gi
                    cg1 += BC[k, 15 + c] * gi
                    cg2 += BC[k, 21 + c] * gi
                    AB[k, 9 + c] += sa0 * gi
                    AB[k, 15 + c] += sa1 * gi
                    AB[k, 21 + c] += sa2 * gi
                # sa x h and h x a
                x0 = sa1 * h2 - sa2 * h1
                x1 = sa2 * h0 - sa0 * h2
                x2 = sa0 * h1 - sa1 * h0
                y0 = h1 * a_2 - h2 * a_1
                y1 = h2 * a_0 - h0 * a_2
                y2 = h0 * a_1 - h1 * a_0
                f += (sl0 * (g0 * a_0 + bh0) + sl1 * (g0 * a_1 + bh1) + sl2 * (g0 * a_2 + bh2)
                      + a_0 * x0 + a_1 * x1 + a_2 * x2 + sa0 * cg0 + sa1 * cg1 + sa2 * cg2)
                AS[k, j, 3] += g0 * a_0 + bh0
                AS[k, j, 4] += g0 * a_1 + bh1
                AS[k, j, 5] += g0 * a_2 + bh2
                AS[k, j, 0] += cg0 + y0
                AS[k, j, 1] += cg1 + y1
                AS[k, j, 2] += cg2 + y2
                Aa[k, 0] += g0 * sl0 + x0
                Aa[k, 1] += g0 * sl1 + x1
                Aa[k, 2] += g0 * sl2 + x2
                AB[k, 0] += sl0 * h0
                AB[k, 1] += sl0 * h1
                AB[k, 2] += sl0 * h2
                AB[k, 3] += sl1 * h0
                AB[k, 4] += sl1 * h1
                AB[k, 5] += sl1 * h2
                AB[k, 6] += sl2 * h0
                AB[k, 7] += sl2 * h1
                AB[k, 8] += sl2 * h2
        F[s] = f
        # 2. BC(w, dw): the formulas of _motion_blocks, differentiated entry by entry
        for k in range(n):
            A = AB[k]
            w0, w1, w2 = w[k, 0], w[k, 1], w[k, 2]
            Adw[k, 0] += -A[5] + A[7] + A[9] + A[16] + A[23]
            Adw[k, 1] += A[2] - A[6] + A[10] + A[18] + A[25]
            Adw[k, 2] += -A[1] + A[3] + A[11] + A[19] + A[26]
            u01 = A[1] + A[3] + A[11] - A[19] - A[21] + A[24]
            u02 = A[2] + A[6] - A[10] + A[15] - A[20] + A[25]
            u12 = A[5] + A[7] - A[12] + A[14] + A[16] - A[23]
            Aw[k, 0] += w1 * u01 + w2 * u02 + 2.0 * w0 * (-A[4] - A[8] - A[17] + A[22])
            Aw[k, 1] += w0 * u01 + w2 * u12 + 2.0 * w1 * (-A[0] - A[8] + A[13] - A[22])
            Aw[k, 2] += w0 * u02 + w1 * u12 + 2.0 * w2 * (-A[0] - A[4] - A[13] + A[17])
        # 3. and 4., tip to base: a body's adjoints are complete once its children are done
        for k in range(n - 1, -1, -1):
            par = parent[k]
            pk0, pk1, pk2 = p[k, 0], p[k, 1], p[k, 2]
            # axes S_k,j = [R^T sw ; R^T (sv + sw x p)] for the ancestors j of k
            for j in range(k):
                if not anc[k, j]:
                    continue
                sw0, sw1, sw2 = S[par, j, 0], S[par, j, 1], S[par, j, 2]
                v0 = S[par, j, 3] + sw1 * pk2 - sw2 * pk1
                v1 = S[par, j, 4] + sw2 * pk0 - sw0 * pk2
                v2 = S[par, j, 5] + sw0 * pk1 - sw1 * pk0
                ea0, ea1, ea2 = AS[k, j, 0], AS[k, j, 1], AS[k, j, 2]
                el0, el1, el2 = AS[k, j, 3], AS[k, j, 4], AS[k, j, 5]
                m0 = R[k, 0, 0] * el0 + R[k, 0, 1] * el1 + R[k, 0, 2] * el2
                m1 = R[k, 1, 0] * el0 + R[k, 1, 1] * el1 + R[k, 1, 2] * el2
                m2 = R[k, 2, 0] * el0 + R[k, 2, 1] * el1 + R[k, 2, 2] * el2
                AS[par, j, 3] += m0
                AS[par, j, 4] += m1
                AS[par, j, 5] += m2
                AS[par, j, 0] += R[k, 0, 0] * ea0 + R[k, 0, 1] * ea1 + R[k, 0, 2] * ea2 + pk1 * m2 - pk2 * m1
                AS[par, j, 1] += R[k, 1, 0] * ea0 + R[k, 1, 1] * ea1 + R[k, 1, 2] * ea2 + pk2 * m0 - pk0 * m2
                AS[par, j, 2] += R[k, 2, 0] * ea0 + R[k, 2, 1] * ea1 + R[k, 2, 2] * ea2 + pk0 * m1 - pk1 * m0
                Ap[k, 0] += m1 * sw2 - m2 * sw1
                Ap[k, 1] += m2 * sw0 - m0 * sw2
                Ap[k, 2] += m0 * sw1 - m1 * sw0
                for r, sr, vr in ((0, sw0, v0), (1, sw1, v1), (2, sw2, v2)):
                    AR[k, r, 0] += sr * ea0 + vr * el0
                    AR[k, r, 1] += sr * ea1 + vr * el1
                    AR[k, r, 2] += sr * ea2 + vr * el2
            # motion: w = R^T wp (+ z qd), dw = R^T dwp (+ (R^T wp) x z qd + z qdd), a = R^T t (+ ...)
            z0, z1, z2 = ax[k, 0], ax[k, 1], ax[k, 2]
            qd = dq[s, k]
            Wa0, Wa1, Wa2 = Aw[k, 0], Aw[k, 1], Aw[k, 2]
            Da0, Da1, Da2 = Adw[k, 0], Adw[k, 1], Adw[k, 2]
            Ta0, Ta1, Ta2 = Aa[k, 0], Aa[k, 1], Aa[k, 2]
            if jtype[k] == 0:
                wq0, wq1, wq2 = w[k, 0] - z0 * qd, w[k, 1] - z1 * qd, w[k, 2] - z2 * qd
                gddq[s, k] = z0 * Da0 + z1 * Da1 + z2 * Da2
                gdq[s, k] = (z0 * Wa0 + z1 * Wa1 + z2 * Wa2 + (wq1 * z2 - wq2 * z1) * Da0 + (wq2 * z0 - wq0 * z2) * Da1
                             + (wq0 * z1 - wq1 * z0) * Da2)
                Wa0 += qd * (z1 * Da2 - z2 * Da1)
                Wa1 += qd * (z2 * Da0 - z0 * Da2)
                Wa2 += qd * (z0 * Da1 - z1 * Da0)
            else:
                wq0, wq1, wq2 = w[k, 0], w[k, 1], w[k, 2]
                gddq[s, k] = z0 * Ta0 + z1 * Ta1 + z2 * Ta2
                gdq[s, k] = 2.0 * ((wq1 * z2 - wq2 * z1) * Ta0 + (wq2 * z0 - wq0 * z2) * Ta1 + (wq0 * z1 - wq1 * z0) * Ta2)
                Wa0 += 2.0 * qd * (z1 * Ta2 - z2 * Ta1)
                Wa1 += 2.0 * qd * (z2 * Ta0 - z0 * Ta2)
                Wa2 += 2.0 * qd * (z0 * Ta1 - z1 * Ta0)
            if par < 0:
                wp0 = wp1 = wp2 = 0.0
                dp0 = dp1 = dp2 = 0.0
                ap0, ap1, ap2 = a0[0], a0[1], a0[2]
            else:
                wp0, wp1, wp2 = w[par, 0], w[par, 1], w[par, 2]
                dp0, dp1, dp2 = dw[par, 0], dw[par, 1], dw[par, 2]
                ap0, ap1, ap2 = a[par, 0], a[par, 1], a[par, 2]
            c0 = wp1 * pk2 - wp2 * pk1
            c1 = wp2 * pk0 - wp0 * pk2
            c2 = wp0 * pk1 - wp1 * pk0
            t0 = ap0 + dp1 * pk2 - dp2 * pk1 + wp1 * c2 - wp2 * c1
            t1 = ap1 + dp2 * pk0 - dp0 * pk2 + wp2 * c0 - wp0 * c2
            t2 = ap2 + dp0 * pk1 - dp1 * pk0 + wp0 * c1 - wp1 * c0
            for r, wr, dr, tr in ((0, wp0, dp0, t0), (1, wp1, dp1, t1), (2, wp2, dp2, t2)):
                AR[k, r, 0] += wr * Wa0 + dr * Da0 + tr * Ta0
                AR[k, r, 1] += wr * Wa1 + dr * Da1 + tr * Ta1
                AR[k, r, 2] += wr * Wa2 + dr * Da2 + tr * Ta2
            m0 = R[k, 0, 0] * Ta0 + R[k, 0, 1] * Ta1 + R[k, 0, 2] * Ta2
            m1 = R[k, 1, 0] * Ta0 + R[k, 1, 1] * Ta1 + R[k, 1, 2] * Ta2
            m2 = R[k, 2, 0] * Ta0 + R[k, 2, 1] * Ta1 + R[k, 2, 2] * Ta2
            # m x wp (the adjoint of c = wp x p)
            e0 = m1 * wp2 - m2 * wp1
            e1 = m2 * wp0 - m0 * wp2
            e2 = m0 * wp1 - m1 * wp0
            if par >= 0:
                for i in range(3):
                    Aw[par, i] += R[k, i, 0] * Wa0 + R[k, i, 1] * Wa1 + R[k, i, 2] * Wa2
                    Adw[par, i] += R[k, i, 0] * Da0 + R[k, i, 1] * Da1 + R[k, i, 2] * Da2
                    Aa[par, i] += (m0, m1, m2)[i]
                # dwp x p and wp x (wp x p)
                Adw[par, 0] += pk1 * m2 - pk2 * m1
                Adw[par, 1] += pk2 * m0 - pk0 * m2
                Adw[par, 2] += pk0 * m1 - pk1 * m0
                Aw[par, 0] += c1 * m2 - c2 * m1 + pk1 * e2 - pk2 * e1
                Aw[par, 1] += c2 * m0 - c0 * m2 + pk2 * e0 - pk0 * e2
                Aw[par, 2] += c0 * m1 - c1 * m0 + pk0 * e1 - pk1 * e0
            Ap[k, 0] += m1 * dp2 - m2 * dp1 + e1 * wp2 - e2 * wp1
            Ap[k, 1] += m2 * dp0 - m0 * dp2 + e2 * wp0 - e0 * wp2
            Ap[k, 2] += m0 * dp1 - m1 * dp0 + e0 * wp1 - e1 * wp0
            if jtype[k] == 0:
                # dR/dq = R [z]x: sum_rc AR_rc (R [z]x)_rc
                gsum = 0.0
                for r in range(3):
                    x0 = R[k, r, 1] * z2 - R[k, r, 2] * z1
                    x1 = R[k, r, 2] * z0 - R[k, r, 0] * z2
                    x2 = R[k, r, 0] * z1 - R[k, r, 1] * z0
                    gsum += AR[k, r, 0] * x0 + AR[k, r, 1] * x1 + AR[k, r, 2] * x2
                gq[s, k] = gsum
            else:
                gsum = 0.0
                for r in range(3):
                    gsum += Ap[k, r] * (Rf[k, r, 0] * z0 + Rf[k, r, 1] * z1 + Rf[k, r, 2] * z2)
                gq[s, k] = gsum


@njit(**_OPTS)
def _contract_serial(q, dq, ddq, G, parent, jtype, Rf, pf, ax, anc, a0, F, gq, gdq, gddq):
    _contract_block(q, dq, ddq, G, parent, jtype, Rf, pf, ax, anc, a0, F, gq, gdq, gddq, 0, q.shape[0])


@njit(parallel=True, **_OPTS)
def _contract_parallel(q, dq, ddq, G, parent, jtype, Rf, pf, ax, anc, a0, F, gq, gdq, gddq):
    N = q.shape[0]
    nb = (N + _BLOCK - 1) // _BLOCK
    for b in prange(nb):
        start = b * _BLOCK
        _contract_block(q, dq, ddq, G, parent, jtype, Rf, pf, ax, anc, a0, F, gq, gdq, gddq, start, min(N, start + _BLOCK))


def contraction_gradient(robot: Robot, q, dq, ddq, G) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """F = sum_jp Y_jp G_jp per sample over the inertial columns, and its gradient.

    q, dq, ddq : (N, n) joint states (rad or m, per s, per s^2); G : (N, n, 10 n) weights.
    Returns F (N,) and dF/dq, dF/dq', dF/dq'' (N, n) each, exact up to rounding.
    """
    q, dq, ddq = (np.ascontiguousarray(x, dtype=float) for x in (q, dq, ddq))
    G = np.ascontiguousarray(G, dtype=float)
    N, n = q.shape
    if G.shape != (N, n, 10 * n):
        raise IdentError(f"contraction weights: expected shape {(N, n, 10 * n)}, got {G.shape}")
    F = np.empty(N)
    gq, gdq, gddq = np.empty((N, n)), np.empty((N, n)), np.empty((N, n))
    kernel = _contract_parallel if use_threads(N) else _contract_serial
    kernel(q, dq, ddq, G, *kernel_arrays(robot), robot.ancestors, -robot.gravity, F, gq, gdq, gddq)
    return F, gq, gdq, gddq
