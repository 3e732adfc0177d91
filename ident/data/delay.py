"""Torque-channel delay of a data set: estimate it against a prediction, and remove it.
"""

from __future__ import annotations

import numpy as np

from ..errors import DataError
from . import conditioning as cond
from .dataset import Dataset, Segment


def apply_delay(dataset: Dataset, delay) -> Dataset:
    """A copy of `dataset` with the torque-channel delay removed (tau(t) <- tau(t + delay)).

    `delay` is a scalar or (n,) in s, e.g. from :func:`estimate_dataset_delay`. Samples whose
    shifted time falls outside their segment are dropped.
    """
    d = np.broadcast_to(np.asarray(delay, dtype=float), (dataset.n,))
    if not np.all(np.isfinite(d)):
        raise DataError("delay: non-finite value")
    segs = []
    dropped = 0
    for s in dataset.segments:
        tau, valid = cond.shift(s.t, s.tau, d)
        dropped += int((~valid).sum())
        if valid.sum() < 3:
            continue
        sl = lambda x: None if x is None else x[valid]  # noqa: E731
        segs.append(Segment(s.source, s.t[valid], s.q[valid], sl(s.dq), sl(s.ddq), tau[valid], sl(s.slow), sl(s.stuck), sl(s.dry)))
    info = dict(dataset.info)
    info["delay_applied"] = d.tolist()
    info["delay_dropped"] = dropped
    return Dataset(dataset.joint_names, segs, list(dataset.warnings), dataset.noise_var, info)


def estimate_dataset_delay(dataset: Dataset, predicted: np.ndarray, max_delay: float = 0.05) -> np.ndarray:
    """Per-joint torque delay (s) of `dataset` against a preliminary fit's prediction (N, n).

    Correlates segment by segment (see :func:`ident.data.conditioning.estimate_delay`); all segments
    must share one sample step.
    """
    steps = np.array([s.dt for s in dataset.segments if s.n_samples > 1])
    if steps.size == 0:
        raise DataError("estimate delay: no segment with two samples")
    if np.ptp(steps) > 1e-6 * steps.max():
        raise DataError("estimate delay: segments have different sample steps; load them separately")
    return cond.estimate_delay([s.tau for s in dataset.segments], dataset.split(predicted), float(steps[0]), max_delay)
