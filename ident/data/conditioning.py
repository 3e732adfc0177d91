"""Signal conditioning of joint logs: zero-phase filtering, differentiation, decimation, period
averaging and torque-channel delay.

All functions work on arrays with samples first (``x`` is (m,) or (m, n)), uniformly sampled at
rate ``fs`` (Hz) or step ``dt`` (s). They know nothing of files; :mod:`ident.data` applies them
segment by segment so no filter or derivative runs across a gap or a file boundary.

Parallel filtering (Gautier): the positions and the torques go through the *same* zero-phase
low-pass, so both keep the same (zero) phase and the same gain; derivatives are taken from the
filtered positions. Default cutoff: :data:`CUTOFF_RATIO` times the highest excited frequency.
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from ..errors import DataError, NumericalError

#: Lowest default cutoff as a multiple of the highest excited frequency, when that is known. Common
#: practice puts the cutoff at 5-10x; at 5x the gain at the highest harmonic stays within 1e-4 of
#: one for the 4th-order Butterworth used twice (filtfilt). The data may ask for more
#: (:func:`cutoff_from_data`).
CUTOFF_RATIO = 5.0

#: Default Butterworth order (applied forwards and backwards, so the effective order doubles).
FILTER_ORDER = 4

DERIVATIVE_METHODS = ("central", "savgol")


def default_cutoff(max_frequency: float, ratio: float = CUTOFF_RATIO) -> float:
    """Low-pass cutoff (Hz) for an excitation whose highest frequency is `max_frequency` (Hz)."""
    if not (np.isfinite(max_frequency) and max_frequency > 0):
        raise DataError(f"highest excited frequency must be a positive number of Hz, got {max_frequency!r}")
    return float(ratio) * float(max_frequency)


#: The data-driven cutoff (:func:`cutoff_from_data`) keeps this fraction of each joint's acceleration
#: power (what stands above the position noise) ...
POWER_FRACTION = 0.99

#: ... and never reaches where the acceleration content falls to this multiple of its noise level.
SIGNAL_TO_NOISE = 10.0

#: Velocity for the sign and shape of dry friction: positions low-passed at this multiple of the cutoff
#: (at most 0.4 x the sample rate), so a reversal is placed sharply before the parallel filter smears it.
SIGN_CUTOFF_RATIO = 4.0


#: Above this many position values the spectra are taken joint by joint (same to rounding, 1e-14).
WELCH_VALUES = 1 << 21


def cutoff_from_data(q: np.ndarray, fs: float, lowest: float | None = None) -> tuple[float, dict]:
    """Low-pass cutoff (Hz) chosen from logged positions q (m, n) sampled at `fs` (Hz).

    Rule: the power spectrum (Welch, Hann windows of about 2 s) of each joint's second difference
    -- the acceleration the fit will see -- is compared with the spectrum white position noise
    would give it, ``S(f) = 2 sigma^2 (2 sin(pi f / fs))^4 / fs``, sigma^2 fitted on the top
    fifth of the band, where no arm moves. Per joint, the cutoff candidate is the frequency below
    which :data:`POWER_FRACTION` of the acceleration power lies, counting only the bins that stand
    :data:`SIGNAL_TO_NOISE` times above the noise (elsewhere differentiating passes more noise than
    motion, and noise in q'' biases the inertial estimates toward zero). The cutoff is the largest candidate over the joints, kept
    within [`lowest`, 0.4 fs] (`lowest`: :data:`CUTOFF_RATIO` x the highest excited frequency when
    known, so no excited harmonic is distorted; default 1 Hz).
    With the dry-friction columns filtered like the torque, a cutoff below some of the motion's
    content does not bias the fit: torque and regressor lose the same part.

    Returns the cutoff and a dict of what was found (per-joint candidate, Hz; noise sigma, rad).
    """
    q = np.asarray(q, dtype=float)
    if q.ndim == 1:
        q = q[:, None]
    lo = 1.0 if lowest is None else float(lowest)
    hi = 0.4 * fs
    m = q.shape[0]
    if m < 64:
        return float(np.clip(lo, 0.0, hi)), dict(rule="too few samples for a spectrum: lowest bound", candidate=[], sigma=[])
    nper = int(min(m - 2, 2 ** int(np.ceil(np.log2(max(64.0, 2.0 * fs))))))
    if q.size <= WELCH_VALUES:
        f, P = signal.welch(np.diff(q, 2, axis=0), fs=fs, nperseg=nper, axis=0, detrend="linear")
    else:
        # one joint at a time: Welch's segment copies of all joints at once take several times the log
        spectra = [signal.welch(np.diff(q[:, k], 2), fs=fs, nperseg=nper, detrend="linear") for k in range(q.shape[1])]
        f = spectra[0][0]
        P = np.stack([p for _, p in spectra], axis=1)
    shape = (2.0 * np.sin(np.pi * f / fs)) ** 4 * 2.0 / fs
    top = f >= 0.8 * (0.5 * fs)
    band = (f > 0) & (f < hi)
    candidates, sigmas = [], []
    for k in range(q.shape[1]):
        sig2 = float(np.median(P[top, k] / np.maximum(shape[top], 1e-300)))
        sigmas.append(float(np.sqrt(max(sig2, 0.0))))
        # only bins standing clearly above the noise count as motion: the scatter of a Welch
        # estimate around the noise level would otherwise add up to a spurious wide band
        strong = band & (P[:, k] > SIGNAL_TO_NOISE * sig2 * shape)
        excess = np.where(strong, P[:, k] - sig2 * shape, 0.0)
        if not np.isfinite(sig2) or excess.sum() <= 0:
            candidates.append(float("nan"))  # a joint that does not move says nothing about the band
            continue
        cum = np.cumsum(excess) / excess.sum()
        f_power = float(f[min(int(np.searchsorted(cum, POWER_FRACTION)), f.size - 1)])
        candidates.append(f_power)
    valid = [c for c in candidates if np.isfinite(c)]
    cut = max(valid) if valid else lo
    return float(np.clip(cut, lo, hi)), dict(rule=f"{100 * POWER_FRACTION:g} % of the acceleration power above the position noise",
                                             candidate=candidates, sigma=sigmas)


def lowpass_sos(fs: float, cutoff: float, order: int = FILTER_ORDER) -> np.ndarray:
    """Butterworth low-pass in second-order sections for rate `fs` (Hz) and `cutoff` (Hz).

    Raises :class:`DataError` when the cutoff is not below the Nyquist frequency fs/2.
    """
    if not (cutoff > 0 and np.isfinite(cutoff)):
        raise DataError(f"cutoff: must be a positive frequency in Hz, got {cutoff!r}")
    if not (order >= 1 and int(order) == order):
        raise DataError(f"filter order: must be a positive integer, got {order!r}")
    if cutoff >= 0.5 * fs:
        raise DataError(f"cutoff: {cutoff:g} Hz is not below the Nyquist frequency {0.5 * fs:g} Hz of data sampled at {fs:g} Hz")
    return signal.butter(int(order), cutoff, btype="low", fs=fs, output="sos")


def min_filter_samples(order: int = FILTER_ORDER) -> int:
    """Fewest samples a segment needs for :func:`lowpass` (scipy's default edge padding + 1)."""
    # sosfiltfilt pads 3 * (2 * n_sections + 1 - min(zeros, poles at origin)) samples; this bound covers it
    return 3 * (2 * ((int(order) + 1) // 2) + 1) + 1


def lowpass(x: np.ndarray, fs: float, cutoff: float, order: int = FILTER_ORDER, periodic: bool = False,
            padlen: int | None = None) -> np.ndarray:
    """Zero-phase Butterworth low-pass (forward-backward, ``scipy.signal.sosfiltfilt``) along axis 0.

    Parameters
    ----------
    x : (m,) or (m, n) samples at rate `fs` (Hz).
    cutoff : -3 dB frequency of the one-way filter, Hz (the two passes give -6 dB there).
    order : Butterworth order of the one-way filter.
    periodic : treat `x` as exactly one period (wrap-around), as after :func:`period_average`.
    padlen : edge padding in samples (default :func:`pad_length` of `x`); a block of a longer
        segment passes the segment's own, so its ends are treated as the whole segment's are.

    Returns
    -------
    (m,) or (m, n) filtered copy, float64.
    """
    x = np.asarray(x, dtype=float)
    sos = lowpass_sos(fs, cutoff, order)
    m = x.shape[0]
    if periodic:
        # three copies, keep the middle one: the wrap-around transients die out in the outer copies
        tiled = np.concatenate([x, x, x], axis=0)
        return np.ascontiguousarray(signal.sosfiltfilt(sos, tiled, axis=0)[m : 2 * m])
    if m < min_filter_samples(order):
        raise DataError(f"too few samples ({m}) to filter; need at least {min_filter_samples(order)}")
    pad = pad_length(m, fs, cutoff) if padlen is None else int(min(m - 1, padlen))
    return signal.sosfiltfilt(sos, x, axis=0, padtype="odd", padlen=pad)


def settle_samples(fs: float, cutoff: float, order: int = FILTER_ORDER, tol: float = 1e-16) -> int:
    """Samples after which the start-up transient of :func:`lowpass` has decayed below `tol` of
    its size: the slowest pole radius r of the Butterworth filter gives ``log(tol) / log(r)``.

    Overlapping blocks by this much (plus what the derivatives and flags add) makes block-wise
    filtering equal to filtering the whole segment to about `tol` relative.
    """
    sos = lowpass_sos(fs, cutoff, order)
    r = max(float(np.max(np.abs(np.roots(sec[3:])))) for sec in sos)
    return int(np.ceil(np.log(tol) / np.log(min(r, 1.0 - 1e-12)))) + 1


def pad_length(m: int, fs: float, cutoff: float) -> int:
    """Edge padding (samples) for :func:`lowpass`: three cutoff periods, at most m - 1.

    scipy's default (a few samples) leaves start-up transients that reach the second derivative
    hundreds of samples into the segment; an odd extension over several time constants of the
    filter keeps value and slope continuous at the ends, so the transient is mostly gone.
    """
    return int(min(m - 1, round(3.0 * fs / cutoff)))


def savgol_window(fs: float, cutoff: float) -> int:
    """Default Savitzky-Golay window (odd, samples) for derivatives after a low-pass at `cutoff`.

    About half a cutoff period: short enough that the cubic fit keeps the pass band flat, so the
    derivative filter does not add its own smoothing on top of the parallel low-pass.
    """
    w = int(round(0.5 * fs / cutoff)) if cutoff and np.isfinite(cutoff) else 7
    w = max(w, 5)
    return w + 1 if w % 2 == 0 else w


def derivative(x: np.ndarray, dt: float, method: str = "central", window: int | None = None, periodic: bool = False) -> np.ndarray:
    """First time derivative along axis 0.

    Parameters
    ----------
    x : (m,) or (m, n) uniformly sampled with step `dt` (s).
    method : "central" (second-order central differences, one-sided at the ends) or "savgol"
        (Savitzky-Golay, cubic, `window` samples, odd).
    periodic : `x` is one period; wrap around at the ends.

    Returns
    -------
    Array like `x`: dx/dt in x's unit per second.
    """
    x = np.asarray(x, dtype=float)
    if method not in DERIVATIVE_METHODS:
        raise DataError(f"derivative: unknown method '{method}' (choose {', '.join(DERIVATIVE_METHODS)})")
    if x.shape[0] < 3:
        raise DataError(f"too few samples ({x.shape[0]}) to differentiate")
    if method == "central":
        if periodic:
            return (np.roll(x, -1, axis=0) - np.roll(x, 1, axis=0)) / (2.0 * dt)
        return np.gradient(x, dt, axis=0, edge_order=2)
    w = int(window or 7)
    if w % 2 == 0 or w < 5:
        raise DataError(f"savgol window: must be an odd number of samples >= 5, got {w}")
    if w > x.shape[0]:
        raise DataError(f"savgol window: {w} samples is longer than the segment ({x.shape[0]} samples)")
    return signal.savgol_filter(x, w, 3, deriv=1, delta=dt, axis=0, mode="wrap" if periodic else "interp")


def derivatives(q: np.ndarray, dt: float, method: str = "central", window: int | None = None, periodic: bool = False):
    """Velocity and acceleration of positions `q` (m, n) sampled with step `dt` (s): (dq, ddq)."""
    dq = derivative(q, dt, method, window, periodic)
    return dq, derivative(dq, dt, method, window, periodic)


def decimate(x: np.ndarray, factor: int, fs: float | None = None, cutoff: float | None = None) -> np.ndarray:
    """Keep every `factor`-th sample of data already low-passed (the low-pass is the anti-alias filter).

    When `fs` and `cutoff` are given, refuses a factor whose new Nyquist frequency falls below the
    cutoff (the result would alias).
    """
    factor = int(factor)
    if factor < 1:
        raise DataError(f"decimate: factor must be a positive integer, got {factor}")
    if factor > 1 and fs is not None:
        if cutoff is None or not cutoff:
            raise DataError("decimate: data were not low-passed (no cutoff), so decimating would alias; give a cutoff")
        if cutoff > 0.5 * fs / factor:
            raise DataError(
                f"decimate: factor {factor} gives {fs / factor:g} Hz, whose Nyquist frequency is below the cutoff {cutoff:g} Hz"
            )
    return x[::factor]


def period_average(x: np.ndarray, samples_per_period: int):
    """Average whole periods of a periodic signal.

    Parameters
    ----------
    x : (m, n) samples; the first ``P * L`` samples are used, ``P = m // L`` whole periods.
    samples_per_period : L.

    Returns
    -------
    mean : (L, n) the period average.
    var : (n,) per-channel noise variance of one sample, pooled over the period (unbiased, P - 1
        degrees of freedom each); the variance of `mean` is ``var / P``.
    P : number of whole periods averaged.
    """
    x = np.asarray(x, dtype=float)
    L = int(samples_per_period)
    P = x.shape[0] // L if L > 0 else 0
    if P < 2:
        raise DataError(f"period averaging needs at least two whole periods ({2 * L} samples), got {x.shape[0]} samples")
    blocks = x[: P * L].reshape((P, L) + x.shape[1:])
    mean = blocks.mean(axis=0)
    var = ((blocks - mean) ** 2).sum(axis=0).mean(axis=0) / (P - 1)
    return mean, var, P


# -- delay between the torque and position channels -----------------------------------------------


def estimate_delay(measured, predicted, dt: float, max_delay: float = 0.05) -> np.ndarray:
    """Per-joint delay of the measured torque behind a predicted torque, by cross-correlation.

    The model is ``measured(t) = predicted(t - d)``: a positive d means the torque channel lags the
    positions. The cross-correlation peak is refined to a fraction of a sample by fitting a parabola
    through the peak and its two neighbours.

    Parameters
    ----------
    measured, predicted : (N, n) arrays, or lists of such arrays (one per segment, correlations are
        summed so nothing is correlated across a segment boundary). Predicted comes from a
        preliminary fit on the same samples.
    dt : sample step, s.
    max_delay : largest |d| searched, s.

    Returns
    -------
    (n,) delay per joint, s.
    """
    meas = measured if isinstance(measured, (list, tuple)) else [measured]
    pred = predicted if isinstance(predicted, (list, tuple)) else [predicted]
    if len(meas) != len(pred):
        raise DataError(f"estimate_delay: {len(meas)} measured segments but {len(pred)} predicted")
    if not dt > 0:
        raise DataError(f"estimate_delay: dt must be positive, got {dt!r}")
    K = max(1, int(np.ceil(max_delay / dt)))
    n = None
    num = den = None
    for a, b in zip(meas, pred):
        a = np.asarray(a, dtype=float)
        b = np.asarray(b, dtype=float)
        if a.ndim == 1:
            a, b = a[:, None], b[:, None]
        if a.shape != b.shape:
            raise DataError(f"estimate_delay: measured {a.shape} and predicted {b.shape} differ in shape")
        if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
            raise DataError("estimate_delay: non-finite torque value")
        if n is None:
            n = a.shape[1]
            num = np.zeros((2 * K + 1, n))
            den = np.zeros((2 * K + 1, n))
        m = a.shape[0]
        if m <= 2 * K + 2:
            continue
        a = a - a.mean(axis=0)
        b = b - b.mean(axis=0)
        # a fixed window of the measured channel against shifted windows of the prediction,
        # normalised by each window's energy: by Cauchy-Schwarz the peak is then exactly at the
        # delay for a noise-free shift (raw overlap sums tilt the peak toward lag zero)
        aw = a[K : m - K]
        for i, k in enumerate(range(-K, K + 1)):
            bw = b[K - k : m - K - k]  # predicted(t - k)
            num[i] += np.einsum("ij,ij->j", aw, bw)
            den[i] += np.einsum("ij,ij->j", bw, bw)
    if num is None or not np.any(den):
        raise NumericalError(f"estimate_delay: segments too short for a search over +-{max_delay:g} s, or torques are constant")
    if np.any(den[K] == 0):
        raise NumericalError("estimate_delay: a predicted torque is constant; no delay can be seen")
    corr = num / np.sqrt(den)
    out = np.zeros(n)
    for j in range(n):
        c = corr[:, j]
        i = int(np.argmax(c))
        if c[i] <= 0:
            raise NumericalError(f"estimate_delay: joint {j}: measured and predicted torques are not positively correlated")
        frac = 0.0
        if 0 < i < 2 * K:
            den = c[i - 1] - 2 * c[i] + c[i + 1]
            if den < 0:
                frac = 0.5 * (c[i - 1] - c[i + 1]) / den
        out[j] = (i - K + frac) * dt
    return out


def shift(t: np.ndarray, x: np.ndarray, delay) -> tuple[np.ndarray, np.ndarray]:
    """Undo a channel delay: values of `x` at ``t + delay`` by linear interpolation.

    Parameters
    ----------
    t : (m,) times, s, increasing.
    x : (m, n) samples.
    delay : scalar or (n,) delay per channel, s (positive: `x` lags).

    Returns
    -------
    shifted : (m, n) corrected channel.
    valid : (m,) bool, false where ``t + delay`` falls outside the samples for some channel.
    """
    t = np.asarray(t, dtype=float)
    x = np.asarray(x, dtype=float)
    n = x.shape[1]
    d = np.broadcast_to(np.asarray(delay, dtype=float), (n,))
    out = np.empty_like(x)
    valid = np.ones(t.shape[0], dtype=bool)
    for j in range(n):
        tj = t + d[j]
        out[:, j] = np.interp(tj, t, x[:, j])
        valid &= (tj >= t[0] - 1e-12) & (tj <= t[-1] + 1e-12)
    return out, valid
