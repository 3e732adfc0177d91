"""Thresholds for a torque-residual collision detector, from held-out residuals.

A detector flags joint j when |tau_measured - tau_model| exceeds its threshold. For a target
false-alarm rate alpha per sample, the threshold is the (1 - alpha) quantile of |e_j| over every
held-out sample (moving, slow and stuck alike: a detector runs all the time):

- with at least :data:`MIN_TAIL` samples beyond it, the empirical quantile;
- otherwise the tail is extrapolated with a generalized Pareto distribution fitted to the
  excesses over the 98 % quantile (peaks over threshold, Pickands 1975; Balkema and de Haan 1974).

Reported with each threshold: the rate at which it fires on the held-out data itself. These are
a starting point, to be confirmed on the robot with its safety functions on; they hold for a
residual conditioned like the check's (same low-pass), not for a raw one.
"""

from __future__ import annotations

import numpy as np

from ..errors import IdentError

#: Default false-alarm rate per sample.
FALSE_ALARM = 1e-4

#: Fewest samples beyond the quantile for the empirical quantile to be used.
MIN_TAIL = 10

#: Quantile above which the tail model is fitted.
TAIL_START = 0.98


def threshold(abs_err: np.ndarray, alpha: float) -> tuple[float, str]:
    """Threshold (same unit as `abs_err`) whose exceedance rate is `alpha` for residual magnitudes
    `abs_err` (N,), and the method used ("empirical" or "tail fit")."""
    a = np.sort(np.asarray(abs_err, dtype=float))
    N = a.size
    if N * alpha >= MIN_TAIL:
        return float(np.quantile(a, 1.0 - alpha)), "empirical"
    from scipy import stats

    u = float(np.quantile(a, TAIL_START))
    exc = a[a > u] - u
    if exc.size < 20:
        raise IdentError(f"collision thresholds: {N} held-out samples are too few for a false-alarm rate of {alpha:g}")
    xi, _, sigma = stats.genpareto.fit(exc, floc=0.0)
    p_u = exc.size / N
    return float(u + stats.genpareto.ppf(1.0 - alpha / p_u, xi, loc=0.0, scale=sigma)), "tail fit"


def collision_thresholds(joint_names, err: np.ndarray, alpha: float = FALSE_ALARM) -> dict:
    """Per-joint thresholds for residuals `err` (N, n) at false-alarm rate `alpha` per sample.

    Returns the plain mapping stored in the parameter file's ``collision`` section::

        {false_alarm_rate, samples, note, joints: {name: {threshold, method, heldout_rate}}}
    """
    if not (0.0 < alpha < 0.5):
        raise IdentError(f"--false-alarm: {alpha:g} is not a rate between 0 and 0.5 per sample")
    err = np.asarray(err, dtype=float)
    out = {}
    for j, name in enumerate(joint_names):
        e = np.abs(err[:, j])
        thr, how = threshold(e, alpha)
        out[name] = {"threshold": float(thr), "method": how, "heldout_rate": float(np.mean(e > thr))}
    return {
        "false_alarm_rate": float(alpha),
        "samples": int(err.shape[0]),
        "note": "a starting point from held-out residuals of the conditioned torque; confirm on the robot with its safety functions on",
        "joints": out,
    }


def false_alarm_rates(collision: dict, joint_names, err: np.ndarray) -> np.ndarray:
    """(n,) rate at which the thresholds of `collision` fire on residuals `err` (N, n)."""
    thr = np.array([collision["joints"][j]["threshold"] for j in joint_names])
    return np.mean(np.abs(np.asarray(err, float)) > thr, axis=0)
