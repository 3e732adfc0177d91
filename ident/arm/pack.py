"""Compiled kernel of the compression pass (numba): the regressor of each sample, written straight
into the packed per-joint rows the triangles need.

The estimator never needs the full (N, n, p) regressor, only joint j's base columns and the torque
(:mod:`ident.estimation.compress`). Computing those rows one sample at a time, from the same
per-sample pieces as the regressor kernel (:func:`ident.arm.kernels._motion_blocks`,
:func:`ident.arm.kernels._body_entries`), skips the zero blocks and the regrouped columns and keeps
the rows in the cache they were made in.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .kernels import _BLOCK, _INLINE, _OPTS, _body_entries, _motion_blocks, use_threads


@njit(**_INLINE)
def _centre_sum(e0, e1, e2, e3, e4, e5, e6, e7, e8, e9, c0, c1, c2, c3, c4, c5, c6, c7, c8, c9):
    """One body's share of the centre's fit, ``e . c`` over its 10 entries.

    Summed as a short tree: one long chain of dependent adds would cost a third of the regressor.
    """
    return (((e0 * c0 + e1 * c1) + (e2 * c2 + e3 * c3)) + ((e4 * c4 + e5 * c5) + (e6 * c6 + e7 * c7))
            + (e8 * c8 + e9 * c9))


@njit(**_INLINE)
def _pack_range(q, dq, ddq, tau, signals, keep, rowpos, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc,
                ncol, offs, out, start, stop):
    """Packed compression rows of samples start..stop-1 (see :func:`pack_chunk`), with scratch of its own."""
    n = q.shape[1]
    R = np.empty((n, 3, 3))
    p = np.empty((n, 3))
    w = np.empty((n, 3))
    dw = np.empty((n, 3))
    a = np.empty((n, 3))
    S = np.empty((n, n, 6))
    BC = np.empty((n, 27))
    for s in range(start, stop):
        _motion_blocks(q, dq, ddq, s, parent, jtype, Rf, pf, ax, anc, a0, R, p, w, dw, a, S, BC)
        for j in range(n):
            if not keep[s, j]:
                continue
            c = ncol[j]
            at = offs[j] + rowpos[s, j] * (c + 1)
            fit = 0.0
            pos = at
            # straight into the packed row: the base columns of each body joint j carries, in
            # natural order (the same columns of body k for every joint that carries it)
            for k in range(j, n):
                if not anc[k, j]:
                    continue
                e0, e1, e2, e3, e4, e5, e6, e7, e8, e9 = _body_entries(a, S, BC, j, k)
                # branch-free: every entry is stored, the position advances only past base
                # columns (a dropped entry is overwritten by the next one, or by the terms or the
                # torque that always follow in the row)
                out[pos] = e0
                pos += kept[k, 0]
                out[pos] = e1
                pos += kept[k, 1]
                out[pos] = e2
                pos += kept[k, 2]
                out[pos] = e3
                pos += kept[k, 3]
                out[pos] = e4
                pos += kept[k, 4]
                out[pos] = e5
                pos += kept[k, 5]
                out[pos] = e6
                pos += kept[k, 6]
                out[pos] = e7
                pos += kept[k, 7]
                out[pos] = e8
                pos += kept[k, 8]
                out[pos] = e9
                pos += kept[k, 9]
                if centered:
                    f = 10 * k
                    fit += _centre_sum(e0, e1, e2, e3, e4, e5, e6, e7, e8, e9, center[j, f], center[j, f + 1], center[j, f + 2],
                                       center[j, f + 3], center[j, f + 4], center[j, f + 5], center[j, f + 6], center[j, f + 7],
                                       center[j, f + 8], center[j, f + 9])
            for col in range(nrigid[j], c):
                v = signals[s, j, tsrc[j, col]]
                out[at + col] = v
                if centered:
                    fit += v * center[j, 10 * n + tsrc[j, col]]
            out[at + c] = tau[s, j] - fit if centered else tau[s, j]


@njit(**_INLINE)
def _pack_layout(keep, ncol, rowpos, counts, offs):
    """Row of each kept (sample, joint) equation in its joint's block, rows per joint, block offsets."""
    N, n = keep.shape
    for j in range(n):
        counts[j] = 0
    for s in range(N):
        for j in range(n):
            if keep[s, j]:
                rowpos[s, j] = counts[j]
                counts[j] += 1
    total = 0
    for j in range(n):
        offs[j] = total
        total += counts[j] * (ncol[j] + 1)


@njit(**_OPTS)
def _pack_serial(q, dq, ddq, tau, signals, keep, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc, ncol, out,
                 counts, offs):
    """:func:`pack_chunk` on the calling thread."""
    rowpos = np.empty(keep.shape, dtype=np.int64)
    _pack_layout(keep, ncol, rowpos, counts, offs)
    _pack_range(q, dq, ddq, tau, signals, keep, rowpos, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc,
                ncol, offs, out, 0, q.shape[0])


@njit(parallel=True, **_OPTS)
def _pack_parallel(q, dq, ddq, tau, signals, keep, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc, ncol, out,
                   counts, offs):
    """:func:`pack_chunk` with blocks of samples spread over numba's threads."""
    rowpos = np.empty(keep.shape, dtype=np.int64)
    _pack_layout(keep, ncol, rowpos, counts, offs)
    N = q.shape[0]
    nb = (N + _BLOCK - 1) // _BLOCK
    for b in prange(nb):
        start = b * _BLOCK
        stop = min(N, start + _BLOCK)
        _pack_range(q, dq, ddq, tau, signals, keep, rowpos, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc,
                    ncol, offs, out, start, stop)


def pack_chunk(q, dq, ddq, tau, signals, keep, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc, ncol, out,
               counts, offs):
    """Evaluate the regressor of N samples and write each joint's compression rows, packed.

    For joint j and every sample s with ``keep[s, j]`` the row ``[x | t]`` of ``ncol[j] + 1``
    values: the rigid-body regressor entries ``Y[s, j, 10 k + i]`` with ``kept[k, i] == 1`` of each
    body k that joint j carries, in natural order (``nrigid[j]`` values in all), then the joint-term
    signals ``x[col] = signals[s, j, tsrc[j, col]]`` for ``nrigid[j] <= col < ncol[j]``; ``t = tau[s, j] - (Y[s, j] . center[j, :10 n] + signals[s, j] . center[j, 10 n:])`` if `centered`
    else ``tau[s, j]``. Joint j's rows form a row-major (counts[j], ncol[j] + 1) block at
    ``out[offs[j]:]``; ``counts``, ``offs`` (n,) int64 are outputs. q, dq, ddq, tau (N, n);
    signals (N, n, k); keep (N, n) bool; kept (n, 10) 0/1 int64; tsrc (n, >= max ncol); center (n, 10 n + k), zero outside the base columns.

    The regressor never exists beyond one sample, so the rows come out of the cache they were
    made in. Samples are independent: with threads (see :func:`use_threads`) the result is
    bit-for-bit the same.
    """
    kernel = _pack_parallel if use_threads(q.shape[0]) else _pack_serial
    kernel(q, dq, ddq, tau, signals, keep, center, centered, parent, jtype, Rf, pf, ax, anc, a0, kept, nrigid, tsrc, ncol, out,
           counts, offs)
