"""Standard deviations that hold on real data: the delete-one-block jackknife.

The classic covariance ``s^2 (W^T W)^-1`` assumes white residuals of equal variance. After the
zero-phase low-pass and decimation, in closed loop and with any model error, the residuals are
coloured, and that formula can be ten times too small. The block jackknife (Kunsch 1989) drops one
contiguous time block at a time (:mod:`ident.estimation.blocks`), re-solves the least-squares
problem without it, and takes the spread of those K estimates:

    beta_(-k) = (A - A_k)^-1 (c - c_k) = beta - (A - A_k)^-1 g_k,    g_k = Y_k^T W^2 (tau_k - Y_k beta)
    cov = (K - 1) / K  sum_k (beta_(-k) - mean)(beta_(-k) - mean)^T

with ``A_k, c_k`` the (weighted) Gram pieces of block k, read off its compressed triangles. It is
the cluster-robust (sandwich) covariance with a leverage correction, so it counts the correlation
inside a block and the model error that varies from block to block, needs no model of either,
and costs K small solves however long the logs are. Why the jackknife rather than the plain
sandwich ``A^-1 (sum_k g_k g_k^T) A^-1``: with a few dozen blocks and some blocks that carry much
of the excitation of a parameter, the plain sandwich is biased low; the delete-one form is not.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

#: Fewer blocks than this: no jackknife (its own uncertainty would be too large); classic formula.
MIN_JACKKNIFE_BLOCKS = 8

UNCERTAINTY = ("blocks", "classic")


def embed_gram(triangles, columns, width: int, weights) -> np.ndarray:
    """Weighted Gram matrix (width+1, width+1) of ``[Y | tau]`` from per-joint triangles.

    triangles : list of (c_j + 1, c_j + 1) upper triangles over columns ``columns[j]`` (then tau);
    weights : (n,) row weights (1/sigma_j), or None for 1. Joints with an empty column set are skipped.
    """
    G = np.zeros((width + 1, width + 1))
    for j, (T, cols) in enumerate(zip(triangles, columns)):
        if T is None or cols is None or len(cols) == 0:
            continue
        w2 = 1.0 if weights is None else float(weights[j]) ** 2
        idx = np.append(np.asarray(cols, dtype=np.int64), width)
        G[np.ix_(idx, idx)] += w2 * (T.T @ T)
    return G


def block_jackknife(grams: np.ndarray, beta: np.ndarray) -> tuple[np.ndarray | None, str]:
    """Delete-one-block jackknife covariance of the least-squares estimate.

    grams : (K, p+1, p+1) per-block weighted Gram matrices of ``[Y | tau]``; beta : (p,) the
    estimate from all blocks. Returns (cov (p, p), "") or (None, reason) when some block carries
    a direction no other block sees (its deletion leaves the problem singular) or K is too small.
    """
    grams = np.asarray(grams, dtype=float)
    K, p = grams.shape[0], grams.shape[1] - 1
    if K < MIN_JACKKNIFE_BLOCKS:
        return None, f"only {K} time block(s) (need {MIN_JACKKNIFE_BLOCKS})"
    A_k = grams[:, :p, :p]
    g_k = grams[:, :p, p] - A_k @ beta
    A = A_k.sum(axis=0)
    d = np.sqrt(np.diag(A))
    if np.any(d == 0):
        return None, "a parameter has no data"
    d = 1.0 / d
    est = np.empty((K, p))
    for k in range(K):
        M = (A - A_k[k]) * d[:, None] * d[None, :]
        try:
            c = scipy.linalg.cho_factor(M, check_finite=False)
        except np.linalg.LinAlgError:
            return None, f"time block {k + 1} of {K} alone excites some direction (deleting it leaves the problem singular)"
        if np.min(np.diag(c[0])) ** 2 < 1e-13 * np.max(np.diag(c[0])) ** 2:
            return None, f"time block {k + 1} of {K} alone excites some direction (deleting it leaves the problem nearly singular)"
        est[k] = beta - d * scipy.linalg.cho_solve(c, d * g_k[k], check_finite=False)
    dev = est - est.mean(axis=0)
    return (K - 1) / K * (dev.T @ dev), ""


def compressor_grams(comp, weights=None) -> np.ndarray:
    """(K, b+1, b+1) per-block weighted Gram matrices of a :class:`Compressor` with blocks."""
    b = comp.n_base
    return np.stack([embed_gram(tri, comp.columns, b, weights) for tri in comp.blocks.blocks])
