"""Least squares on the compressed problem: the solve, its rank check and the directions the data barely excite.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from ..errors import NumericalError
from .compress import Reduced

#: Scaled singular values below this fraction of the largest make the data rank deficient.
RANK_TOL = 1e-10


#: Scaled singular values below this fraction of the largest are reported as unexcited directions.
UNEXCITED_TOL = 1e-4


@dataclass
class LeastSquares:
    beta: np.ndarray
    cov: np.ndarray
    condition: float
    singular: np.ndarray  # scaled singular values
    Vt: np.ndarray  # scaled right singular vectors (rows)
    scale: np.ndarray  # column norms
    rank_deficient: bool


def solve_reduced(red: Reduced, names: list[str], allow_deficient: bool = False) -> LeastSquares:
    """Least squares on ``min ||R beta - z||^2``: estimate, covariance and conditioning."""
    R, z = red.R, red.z
    b = R.shape[0]
    scale = np.linalg.norm(R, axis=0)
    dead = np.flatnonzero(scale == 0)
    safe = np.where(scale > 0, scale, 1.0)
    U, s, Vt = np.linalg.svd(R / safe, full_matrices=False)
    cond = float(s[0] / s[-1]) if s[-1] > 0 else float("inf")
    deficient = dead.size > 0 or s[-1] < RANK_TOL * s[0]
    dof = red.rows - b
    if dof <= 0:
        raise NumericalError(f"not enough data: {red.rows} equations for {b} base parameters")
    if deficient:
        if not allow_deficient:
            what = [names[k] for k in dead] if dead.size else direction_text(Vt[-1], safe, names)
            raise NumericalError(
                f"the data do not determine every base parameter (scaled condition number {cond:.3g}); "
                f"unexcited: {what if isinstance(what, str) else ', '.join(what)}; move the joints more or use method 'consistent'"
            )
        keep = s > RANK_TOL * s[0]
        beta = (Vt[keep].T @ ((U[:, keep].T @ z) / s[keep])) / safe
        r = R @ beta - z
        sigma2 = (r @ r + red.rho**2) / dof
        cov = np.full((b, b), np.nan)
        return LeastSquares(beta, cov, cond, s, Vt, safe, True)
    beta = scipy.linalg.solve_triangular(R, z, check_finite=False)
    Rinv = scipy.linalg.solve_triangular(R, np.eye(b), check_finite=False)
    sigma2 = red.rho**2 / dof
    cov = sigma2 * (Rinv @ Rinv.T)
    return LeastSquares(beta, cov, cond, s, Vt, safe, False)


def direction_text(v_scaled: np.ndarray, scale: np.ndarray, names: list[str], top: int = 4) -> str:
    """Readable direction in base-parameter space, e.g. ``0.71 link7.xxR - 0.70 link7.yy``."""
    v = v_scaled / scale
    v = v / np.abs(v).max()
    idx = np.argsort(-np.abs(v))[:top]
    terms = [f"{'-' if v[k] < 0 else '+'} {abs(v[k]):.2g} {names[k]}" for k in idx if abs(v[k]) > 1e-3]
    text = " ".join(terms)
    return text[2:] if text.startswith("+ ") else text


def unexcited_directions(ls: LeastSquares, names: list[str]) -> list[str]:
    out = []
    for k in np.flatnonzero(ls.singular < UNEXCITED_TOL * ls.singular[0]):
        out.append(f"{direction_text(ls.Vt[k], ls.scale, names)} (relative singular value {ls.singular[k] / ls.singular[0]:.2g})")
    return out
