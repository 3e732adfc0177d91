"""Torque-channel delay from a preliminary least-squares fit (a profiled search over shifts).
"""

from __future__ import annotations

import numpy as np

from ..data.dataset import Dataset
from ..errors import DataError, NumericalError


def preliminary_delay(dataset: Dataset, robot, terms=("fv", "fc", "ia"), max_delay: float = 0.05, max_rows: int = 50_000, sweeps: int = 3) -> np.ndarray:
    """Per-joint torque delay (s) of `dataset` by a profiled least-squares search against a
    preliminary fit's prediction.

    For each candidate delay the measured torque is shifted and the preliminary OLS fit on the base
    regressor is redone (cheaply, through one QR factorization of the regressor); the delay is the
    one whose fit leaves the smallest residual, refined between samples by a parabola. Equivalently
    it maximizes the correlation between the shifted torque and the torque its own fit predicts.
    Correlating once against a fit made on the delayed data (:func:`estimate_dataset_delay` with
    that prediction) would under-estimate the delay, because the fit absorbs part of it into its
    parameters. Joints are solved one at a time in a few sweeps (they share the parameters).

    Parameters
    ----------
    dataset : conditioned samples; every segment must share one sample step.
    robot : the model (joints in the data set's order).
    terms : joint terms of the preliminary fit; with "fc", samples flagged slow are left out.
        Keep "ia" for geared arms: without the rotor-inertia column a shifted viscous column
        (fv q'(t + d) ~ fv q' + fv d q'') stands in for it, and the "delay" found is that stand-in.
    max_delay : largest |delay| searched, s.
    max_rows : at most this many samples (evenly spread) enter the fit.

    Returns
    -------
    (n,) delay, s (positive: the torque channel lags the positions); remove it with
    :func:`apply_delay` or the ``delay`` option of :func:`load_dataset`.
    """
    from ..blas import single_thread_blas

    with single_thread_blas():  # narrow products: BLAS threads only add synchronisation
        return _preliminary_delay(dataset, robot, terms, max_delay, max_rows, sweeps)


def _preliminary_delay(dataset, robot, terms, max_delay, max_rows, sweeps):
    from ..arm.base import base_parameters
    from ..arm.dynamics import term_columns
    from ..arm.model import DRY_FRICTION_TERMS, parse_terms
    from ..arm.regressor import regressor

    terms = parse_terms(terms)
    if list(robot.joint_names) != list(dataset.joint_names):
        raise DataError(f"preliminary delay: the data's joints ({', '.join(dataset.joint_names)}) are not the model's ({', '.join(robot.joint_names)})")
    if dataset.dq is None or dataset.ddq is None:
        raise DataError("preliminary delay: the data set has no velocities/accelerations (load it with load_dataset)")
    steps = np.array([s.dt for s in dataset.segments if s.n_samples > 1])
    if steps.size == 0 or np.ptp(steps) > 1e-6 * steps.max():
        raise DataError("preliminary delay: segments must share one sample step")
    dt = float(steps[0])
    K = max(1, int(np.ceil(max_delay / dt)))
    # rows far enough inside their segment that every shift stays inside it
    rows = [np.arange(sl.start + K + 1, sl.stop - K - 1) for sl in dataset.segment_slices() if sl.stop - sl.start > 2 * K + 12]
    g = np.concatenate(rows) if rows else np.zeros(0, dtype=int)
    if g.size > max_rows:
        g = g[np.linspace(0, g.size - 1, max_rows).round().astype(int)]
    bp = base_parameters(robot, terms)
    if g.size * robot.n < 2 * bp.n_base:
        raise NumericalError(f"preliminary delay: too few samples ({g.size}) for a fit of {bp.n_base} base parameters over +-{max_delay:g} s shifts")
    dry = dataset.dry
    signals = None if dry is None else term_columns(terms, dataset.dq[g], dataset.ddq[g], dry[g])  # parallel filtering
    Yb = bp.columns(regressor(robot, dataset.q[g], dataset.dq[g], dataset.ddq[g], terms, signals))  # (R, n, b)
    use = np.ones((g.size, robot.n))
    if any(c in DRY_FRICTION_TERMS for c in terms) and dataset.slow is not None:
        use = (~dataset.slow[g]).astype(float)  # sign(q') is unreliable there
    if dataset.stuck is not None:
        use *= ~dataset.stuck[g]
    Yb *= use[:, :, None]
    R_, n, b = Yb.shape
    A = Yb.reshape(R_ * n, b)
    scale = np.linalg.norm(A, axis=0)
    scale[scale == 0] = 1.0
    A = A / scale
    # orthonormal basis of the regressor's range, Q = A L^-T from the Cholesky factor of A^T A:
    # squaring the condition number is harmless for a preliminary fit on scaled columns, and it
    # is much cheaper than a QR of the tall matrix
    G = A.T @ A
    ev = np.linalg.eigvalsh(G)
    if ev[0] <= 1e-12 * ev[-1]:
        raise NumericalError("preliminary delay: the data do not excite every base parameter (rank-deficient regressor); use richer motion or fewer terms")
    Lc = np.linalg.cholesky(G)
    Q = np.linalg.solve(Lc, A.T).T.reshape(R_, n, b)
    tau = dataset.tau
    lags = np.arange(-K, K + 1)
    d = np.zeros(n)  # samples

    def shifted(j, x):
        fl = int(np.floor(x))
        fr = x - fl
        return ((1 - fr) * tau[g + fl, j] + fr * tau[g + fl + 1, j]) * use[:, j]

    cur = np.stack([shifted(j, 0.0) for j in range(n)], 1)
    proj = np.einsum("rjb,rj->b", Q, cur)
    for _ in range(max(1, int(sweeps))):
        moved = 0.0
        for j in range(n):
            rest = proj - Q[:, j, :].T @ cur[:, j]
            T = tau[g[None, :] + lags[:, None], j] * use[:, j]  # (2K+1, R): torque shifted by each lag
            V = rest + T @ Q[:, j, :]
            rss = (T * T).sum(1) - (V * V).sum(1)  # + a constant of the other joints
            i = int(np.argmin(rss))
            frac = 0.0
            if 0 < i < 2 * K:
                den = rss[i - 1] - 2 * rss[i] + rss[i + 1]
                if den > 0:
                    frac = 0.5 * (rss[i - 1] - rss[i + 1]) / den
            new = float(np.clip(lags[i] + frac, -K, K - 1e-9))
            moved = max(moved, abs(new - d[j]))
            d[j] = new
            cur[:, j] = shifted(j, new)
            proj = rest + Q[:, j, :].T @ cur[:, j]
        if moved < 0.01:
            break
    return d * dt
