"""Information criteria on the base regressor with the joint-term columns (friction, armature)
included: the condition number of the column-scaled stacked regressor (Gautier and Khalil 1992)
and the log determinant of the information matrix (D-optimality), with their gradients.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.linalg
import scipy.optimize

from ..arm.base import base_parameters
from ..arm.model import Robot

#: Condition number beyond which a design is refused: the base parameters would be numerically
#: unidentifiable (common practice regards values above a few hundred as already poor).
COND_UNUSABLE = 1e6


def information_matrix(robot: Robot, q, dq, ddq, terms, weights=None, base=None) -> np.ndarray:
    """Information matrix A = sum_k Y_b,k^T W^2 Y_b,k (b, b) of the base regressor over N samples.

    `weights` (n,) scales each joint's rows (1 / torque noise); `base` is the
    :class:`ident.arm.base.BaseParameters` (default: computed for `robot`, `terms`).
    """
    from ..arm.regressor import iter_regressor

    bp = base if base is not None else base_parameters(robot, terms)
    w = np.ones(robot.n) if weights is None else np.asarray(weights, dtype=float)
    A = np.zeros((bp.n_base, bp.n_base))
    for _, Y in iter_regressor(robot, q, dq, ddq, bp.terms):
        Wb = bp.columns(Y) * w[None, :, None]
        Wb = Wb.reshape(-1, bp.n_base)
        A += Wb.T @ Wb
    return A


def criteria_from_information(A: np.ndarray) -> dict:
    """Both criteria of an information matrix A (b, b).

    ``cond``: condition number of the column-scaled stacked base regressor, sqrt of the eigenvalue
    ratio of D A D with D = diag(A)^-1/2 (inf when rank deficient). ``logdet``: log det A
    (-inf when singular).
    """
    d = np.sqrt(np.clip(np.diag(A), 0, None))
    if np.any(d <= 0):
        return {"cond": math.inf, "logdet": -math.inf}
    C = A / d[:, None] / d[None, :]
    lam = np.linalg.eigvalsh(0.5 * (C + C.T))
    cond = math.sqrt(lam[-1] / lam[0]) if lam[0] > lam[-1] * 1e-15 else math.inf
    sign, logdet = np.linalg.slogdet(A)
    return {"cond": cond, "logdet": float(logdet) if sign > 0 else -math.inf}


def criterion_grad(A: np.ndarray, kind: str, sharpness: float | None = None) -> tuple[float, np.ndarray]:
    """Minimized criterion f(A) and its gradient dF/dA (b, b) (symmetric).

    cond: f = log cond = 0.5 (log lam_max - log lam_min) of C = D A D, D = diag(A)^-1/2. With
    `sharpness` p, the extreme eigenvalues are replaced by power means, 0.5/p (log sum lam^p +
    log sum lam^-p): a smooth upper bound of log cond (it tends to it as p grows) that L-BFGS-B
    descends without stalling where the extreme eigenvalues cross.
    logdet: f = -log det(A) / b (mean log eigenvalue, so its scale matches the penalties).
    """
    b = A.shape[0]
    if kind == "logdet":
        try:
            c, low = scipy.linalg.cho_factor(A)
        except np.linalg.LinAlgError:
            return math.inf, np.zeros_like(A)
        logdet = 2.0 * np.sum(np.log(np.diag(c)))
        Ainv = scipy.linalg.cho_solve((c, low), np.eye(b))
        return -logdet / b, -Ainv / b
    dg = np.diag(A)
    if np.any(dg <= 0):
        return math.inf, np.zeros_like(A)
    Dv = dg**-0.5
    C = A * Dv[:, None] * Dv[None, :]
    lam, V = np.linalg.eigh(0.5 * (C + C.T))
    if lam[0] <= 0:
        return math.inf, np.zeros_like(A)
    if sharpness is None:
        f = 0.5 * (math.log(lam[-1]) - math.log(lam[0]))
        H = 0.5 * (np.outer(V[:, -1], V[:, -1]) / lam[-1] - np.outer(V[:, 0], V[:, 0]) / lam[0])
    else:
        p = float(sharpness)
        ll = np.log(lam)
        # weights of the two power means, shifted by their largest exponent (no overflow)
        wa, wc = np.exp(p * (ll - ll[-1])), np.exp(-p * (ll - ll[0]))
        f = 0.5 * ((ll[-1] - ll[0]) + (math.log(wa.sum()) + math.log(wc.sum())) / p)
        H = (V * (0.5 * (wa / wa.sum() - wc / wc.sum()) / lam)) @ V.T
    # dC = dD A D + D dA D + D A dD with dD_jj = -0.5 A_jj^-3/2 dA_jj
    G = Dv[:, None] * H * Dv[None, :]
    corr = (A * Dv[None, :] * H).sum(axis=1) * dg**-1.5  # (A D H)_jj A_jj^-3/2
    G[np.diag_indices(b)] -= corr
    return f, G
