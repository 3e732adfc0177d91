"""The noise floor of a held-out check: the RMS torque error a perfect model would still show.

The check compares the *conditioned* torque (zero-phase low-pass, maybe averaged over periods)
with the prediction, so the floor is the noise left after conditioning, not the raw noise:

    floor_j^2 = sigma_j^2 * G / P

- ``sigma_j^2`` per-sample variance of the raw torque noise of joint j. Two estimates:
  *period averaging* (``Dataset.noise_var``: the spread of each sample around its period mean,
  pooled over periods, when the excitation period is known), or, without a period, a
  *difference-based* estimate on the raw torque: the k-th order difference of a signal that is
  smooth at the sample rate is almost pure noise, with variance C(2k, k) sigma^2 for white noise
  (k = 3 here); the median absolute difference (scaled by 1.4826, the normal MAD factor) keeps
  Coulomb steps and other rare jumps from inflating it.
- ``G`` noise-power gain of the low-pass: white noise of variance sigma^2 comes out of the
  forward-backward Butterworth (power response |H|^4) with variance
  ``sigma^2 (1/pi) int_0^pi |H(e^{jw})|^4 dw``, computed from the filter's frequency response.
- ``P`` periods averaged (1 without averaging): the mean of P periods has variance sigma^2 / P.

Decimation keeps every k-th filtered sample and leaves the per-sample variance unchanged.
"""

from __future__ import annotations

from math import comb

import numpy as np
from scipy import signal

from ..data.conditioning import lowpass_sos

#: Order of the differences of the difference-based estimate.
DIFF_ORDER = 3

#: Median absolute deviation -> standard deviation for normal noise.
MAD_TO_STD = 1.4826


def filter_noise_gain(fs: float, cutoff: float | None, order: int) -> float:
    """Variance gain (dimensionless) of the zero-phase Butterworth low-pass (`order`, `cutoff` Hz,
    forward and backward) on white noise sampled at `fs` Hz; 1 without a filter."""
    if not cutoff:
        return 1.0
    sos = lowpass_sos(fs, cutoff, order)
    _, h = signal.sosfreqz(sos, worN=1 << 15)
    return float(np.mean(np.abs(h) ** 4))


def difference_noise_var(x: np.ndarray, k: int = DIFF_ORDER) -> np.ndarray:
    """Robust per-channel noise variance (n,) of samples `x` (m, n) from k-th order differences."""
    d = np.diff(np.asarray(x, dtype=float), n=k, axis=0)
    mad = np.median(np.abs(d - np.median(d, axis=0)), axis=0)
    return (MAD_TO_STD * mad) ** 2 / comb(2 * k, k)


def noise_floor(data, raw=None) -> tuple[np.ndarray | None, str]:
    """Floor (n,) of the RMS error on the conditioned torque of `data` (N m or N), and how it was
    estimated (one line). `raw` is the same logs read without conditioning
    (:func:`ident.data.load.read_logs`), used when `data` has no period-averaging estimate.
    Returns (None, reason) when neither is available.
    """
    info = getattr(data, "info", None) or {}
    opts = info.get("options", {})
    cutoff = info.get("cutoff")
    order = int(opts.get("filter_order", 4))
    segs = [s for s in data.segments if s.n_samples > 1]
    if not segs:
        return None, "no segment long enough"
    fs = 1.0 / segs[0].dt
    fs *= int(opts.get("decimate", 1) or 1)  # the filter ran at the log rate, before decimation
    gain = filter_noise_gain(fs, cutoff, order)
    filt = f"low-pass noise-power gain {gain:.4g} (Butterworth order {order}, {cutoff:g} Hz, both ways, from its frequency response)" if cutoff else "no low-pass"
    if data.noise_var is not None:
        averaged = bool(opts.get("average"))
        periods = float(info.get("periods_averaged") or 0)
        per_seg = periods / max(len(segs), 1) if (periods and averaged) else 1.0
        floor = np.sqrt(np.asarray(data.noise_var, float) * gain / per_seg)
        how = (f"divided by the {per_seg:g} periods averaged per segment" if averaged
               else f"the samples not averaged ({periods:g} periods after the first give the spread)")
        return floor, (f"per-sample noise from period averaging (spread between periods), {how}; {filt}")
    if raw is not None and raw.segments:
        num = np.zeros(raw.n)
        den = 0
        for s in raw.segments:
            if s.n_samples > 4 * DIFF_ORDER:
                num += difference_noise_var(s.tau) * s.n_samples
                den += s.n_samples
        if den:
            var = num / den
            rfs = 1.0 / raw.segments[0].dt
            g = filter_noise_gain(rfs, cutoff, order)
            filt = f"low-pass noise-power gain {g:.4g} (Butterworth order {order}, {cutoff:g} Hz, both ways, from its frequency response)" if cutoff else "no low-pass"
            return np.sqrt(var * g), f"per-sample noise from robust {DIFF_ORDER}rd-order differences of the raw torque (no period known); {filt}"
    return None, "unknown: no period averaging and no raw log to estimate it from"
