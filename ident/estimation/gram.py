"""The centred Gram route of :class:`ident.estimation.compress.Compressor`: its centre, the
factoring of the accumulated Gram matrices and the a-posteriori accuracy check.

Why and how the route is accurate is told in the notes of :mod:`ident.estimation.compress`; this
file holds the pieces that decide, from the data folded so far, whether a Gram fold may be used
(:meth:`GramRoute._center`), turn the Gram matrices back into triangles (:meth:`GramRoute._merge_grams`)
and confirm the result (:meth:`GramRoute._gram_accurate`).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from scipy.linalg import lapack

from ..errors import NumericalError
from .blocks import merge_triangles

#: Largest a-posteriori bound on the relative error the Gram route may add (see the module notes).
GRAM_TOL = 1e-12
#: The Gram route needs at most this scaled condition number of the data seen so far.
GRAM_KAPPA = 1e5
_EPS = float(np.finfo(float).eps)


def residual_sums(triangles, columns, beta: np.ndarray) -> np.ndarray:
    """Per-joint residual sums of squares (n,) of per-joint triangles at base parameters beta."""
    out = np.empty(len(triangles))
    for j, cols in enumerate(columns):
        T = triangles[j]
        r = T[:, :-1] @ beta[cols] - T[:, -1]
        out[j] = r @ r
    return out


class GramRoute:
    """Gram-route methods of the compressor. The host class provides ``robot``, ``columns`` (per
    joint, the base columns of its triangle), ``triangles``, ``folded`` (fold counts), ``n_base``
    and :meth:`joint_rows`."""

    def _merge_grams(self, tri, grams, center) -> None:
        """Factor each joint's centred Gram matrix, undo the centring, merge into its triangle."""
        for j, cols in enumerate(self.columns):
            G = grams[j]
            if not np.any(G):
                continue
            d = np.sqrt(np.diag(G))
            d[d == 0] = 1.0
            # Cholesky of the column-scaled matrix keeps the factor's error relative to each
            # column's own size; pivoting with a rank stop takes the rank-deficient blocks single
            # joints often have (joint 1 of a vertical arm does not feel gravity).
            U, piv, rank, info = lapack.dpstrf(G / np.outer(d, d), tol=-1.0, lower=0)
            if info < 0:  # pragma: no cover - LAPACK argument error
                raise NumericalError(f"factoring the Gram matrix failed (LAPACK info {info})")
            F = np.zeros_like(U)
            F[:, piv - 1] = np.triu(U)
            F[rank:] = 0.0
            T = scipy.linalg.qr(F, mode="r", check_finite=False)[0] * d
            # [A | tau] = [A | tau - A beta_c] [[I, beta_c], [0, 1]]: a unit triangular column operation.
            T[:, -1] += T[:, :-1] @ center[cols]
            tri[j] = merge_triangles(tri[j], T)

    def _center(self, rows: np.ndarray, tri):
        """Centre for the Gram route: the least-squares estimate from the data folded so far, or
        None while that estimate is too uncertain or the problem too ill-conditioned for the route's
        error bound (module notes) to be expected below :data:`GRAM_TOL`. rows: (n,) equations so far."""
        dof = int(rows.sum()) - self.n_base
        if dof <= 0:
            return None
        ls = self._scaled_ls(None, tri)
        if ls is None:
            return None
        beta, kappa, D, R, rho = ls
        # expected |beta_final - beta_c|: the statistical spread of beta_c
        Rinv = scipy.linalg.solve_triangular(R, np.eye(R.shape[0]), check_finite=False)
        spread = rho / np.sqrt(dof) * np.sqrt((Rinv * Rinv).sum(axis=1))
        est = _EPS * self._growth() * kappa**2 * np.linalg.norm(D * spread) / max(np.linalg.norm(D * beta), 1e-300)
        return beta if est <= 0.25 * GRAM_TOL else None

    def _growth(self) -> float:
        """Growth factor of the Gram's rounding error in the bounds: the widest row."""
        return float(max(c.size for c in self.columns) + 1)

    def _scaled_ls(self, weights, tri):
        """(beta, scaled condition number, column norms D, R, rho) of the stacked problem so far,
        or None when it does not determine every base parameter well (above :data:`GRAM_KAPPA`)."""
        n = self.robot.n
        w = np.ones(n) if weights is None else np.asarray(weights, dtype=float).reshape(n)
        # the check closing one time block and the centre opening the next see the same data
        # (only its split between the totals and the block differs): solved once. The fold
        # counts change with every chunk folded and every merge, so they mark the data.
        mark = tuple(self.folded.values())
        memo = getattr(self, "_ls_memo", None)
        if weights is None and memo is not None and memo[0] == mark:
            return memo[1]
        S = np.vstack([self.joint_rows(j, w[j], T[j]) for T in self._sets(tri) for j in range(n)])
        out = self._solve_scaled(S)
        if weights is None:
            self._ls_memo = (mark, out)
        return out

    def _solve_scaled(self, S: np.ndarray):
        """:meth:`_scaled_ls` of the stacked rows S ((rows, b + 1))."""
        b = self.n_base
        T = scipy.linalg.qr(S, mode="r", check_finite=False)[0][: b + 1]
        if T.shape[0] < b + 1:
            return None
        R, z, rho = np.triu(T[:b, :b]), T[:b, b], float(abs(T[b, b]))
        D = np.linalg.norm(R, axis=0)
        if np.any(D == 0) or not np.all(np.isfinite(R)):
            return None
        s = np.linalg.svd(R / D, compute_uv=False)
        if not s[-1] > GRAM_KAPPA**-1 * s[0]:
            return None
        beta = scipy.linalg.solve_triangular(R, z, check_finite=False)
        return beta, float(s[0] / s[-1]), D, R, rho

    def _gram_accurate(self, tri, grams, center, rows: np.ndarray) -> bool:
        """A-posteriori check of a Gram fold (module notes): every error bound below GRAM_TOL."""
        p = self._growth()
        ls = self._scaled_ls(None, tri)
        if ls is None:
            return False
        beta, kappa, D, _, _ = ls
        est = _EPS * p * kappa**2 * np.linalg.norm(D * (beta - center)) / max(np.linalg.norm(D * beta), 1e-300)
        rss = sum(residual_sums(T, self.columns, beta) for T in self._sets(tri))
        for j, cols in enumerate(self.columns):
            G = grams[j]
            if not np.any(G):
                continue
            # |x^T E x| <= eps p x^T diag(G) x for the Gram's rounding error E, at x = [beta - beta_c; -1]
            x = np.append(beta[cols] - center[cols], -1.0)
            if not rss[j] > _EPS * p * float(np.diag(G) @ (x * x)) / GRAM_TOL:
                return False
        # the same with the weights WLS will use (1/sigma_j from these residuals)
        sigma = np.sqrt(rss / np.maximum(rows, 1))
        lw = self._scaled_ls(1.0 / np.maximum(sigma, 1e-300), tri)
        if lw is None:
            return False
        bw, kw, Dw, _, _ = lw
        est_w = _EPS * p * kw**2 * np.linalg.norm(Dw * (bw - center)) / max(np.linalg.norm(Dw * bw), 1e-300)
        return bool(max(est, est_w) <= GRAM_TOL)
