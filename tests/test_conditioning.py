"""Signal conditioning: zero-phase low-pass, differentiation, decimation, period averaging, delay."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from ident.data import conditioning as C
from ident.errors import DataError, NumericalError

FS = 1000.0  # Hz
FREQS = np.array([0.1, 0.3, 0.5, 0.9, 1.5])  # Hz, highest excited frequency 1.5 Hz
AMPS = np.array([0.3, 0.2, 0.1, 0.05, 0.03])  # rad


def multisine(t, rng):
    """A multi-sine position (rad) and its exact velocity and acceleration."""
    ph = rng.uniform(0, 2 * np.pi, FREQS.size)
    w = 2 * np.pi * FREQS
    arg = np.outer(t, w) + ph
    return (AMPS * np.sin(arg)).sum(1), (AMPS * w * np.cos(arg)).sum(1), -(AMPS * w * w * np.sin(arg)).sum(1)


def rel_rms(err, ref):
    return float(np.sqrt(np.mean(err**2)) / np.sqrt(np.mean(ref**2)))


@pytest.fixture(scope="module")
def noisy():
    rng = np.random.default_rng(7)
    t = np.arange(0.0, 20.0, 1.0 / FS)
    q, dq, ddq = multisine(t, rng)
    # 1e-4 rad white noise: about a 16-bit absolute encoder's resolution (from memory)
    return t, q + 1e-4 * rng.standard_normal(t.size), q, dq, ddq


def test_lowpass_matches_scipy_sosfiltfilt():
    # reference library: scipy.signal.butter + sosfiltfilt with the same padding
    rng = np.random.default_rng(0)
    x = rng.standard_normal((3000, 3))
    sos = signal.butter(4, 20.0, fs=FS, output="sos")
    ref = signal.sosfiltfilt(sos, x, axis=0, padtype="odd", padlen=C.pad_length(3000, FS, 20.0))
    np.testing.assert_allclose(C.lowpass(x, FS, 20.0), ref, rtol=0, atol=1e-12)


def test_lowpass_matches_transfer_function_filtfilt():
    # reference library: scipy.signal.filtfilt on the (b, a) form, an independent code path
    rng = np.random.default_rng(1)
    x = rng.standard_normal(4000)
    b, a = signal.butter(4, 30.0, fs=FS)
    ref = signal.filtfilt(b, a, x, padtype="odd", padlen=C.pad_length(4000, FS, 30.0))
    np.testing.assert_allclose(C.lowpass(x, FS, 30.0), ref, atol=1e-9)


def test_butterworth_gain_at_cutoff_is_minus_6db_after_two_passes():
    # handbook fact: a Butterworth low-pass is -3 dB at its cutoff; forward-backward squares the gain
    sos = C.lowpass_sos(FS, 25.0)
    _, h = signal.sosfreqz(sos, worN=[25.0], fs=FS)
    assert abs(20 * np.log10(abs(h[0]) ** 2) + 6.0206) < 1e-3
    # and the default cutoff leaves the highest harmonic untouched: gain within 1e-4 of one
    sos = C.lowpass_sos(FS, C.default_cutoff(1.5))
    _, h = signal.sosfreqz(sos, worN=[1.5], fs=FS)
    assert abs(abs(h[0]) ** 2 - 1.0) < 1e-4


def test_filtered_signal_has_zero_phase_lag(noisy):
    t, qn, q, _, _ = noisy
    fc = C.default_cutoff(FREQS.max())
    qf = C.lowpass(qn, FS, fc)
    lags = signal.correlation_lags(q.size, q.size)
    # reference: scipy.signal.correlate; the peak of the cross-correlation gives the lag
    xc = signal.correlate(qf - qf.mean(), q - q.mean())
    assert lags[np.argmax(xc)] == 0
    # the test has teeth: the one-way (causal) filter does lag
    causal = signal.sosfilt(C.lowpass_sos(FS, fc), qn)
    xc = signal.correlate(causal - causal.mean(), q - q.mean())
    assert lags[np.argmax(xc)] > 0


@pytest.mark.parametrize("method", ["central", "savgol"])
def test_derivatives_of_noisy_multisine(noisy, method):
    t, qn, q, dq, ddq = noisy
    fc = C.default_cutoff(FREQS.max())
    qf = C.lowpass(qn, FS, fc)
    v, a = C.derivatives(qf, 1.0 / FS, method, C.savgol_window(FS, fc))
    trim = int(2 * FS / fc)  # the edge trim load_dataset applies by default
    s = slice(trim, -trim)
    # stated bounds: velocity within 0.2 %, acceleration within 1.5 % (relative RMS)
    assert rel_rms((v - dq)[s], dq[s]) < 2e-3
    assert rel_rms((a - ddq)[s], ddq[s]) < 1.5e-2
    # without the low-pass the same differences amplify the noise beyond use
    _, a_raw = C.derivatives(qn, 1.0 / FS, method, 5)
    assert rel_rms((a_raw - ddq)[s], ddq[s]) > 0.5


def test_savgol_derivative_matches_scipy():
    # reference library: scipy.signal.savgol_filter
    rng = np.random.default_rng(3)
    x = np.cumsum(rng.standard_normal((500, 2)), axis=0)
    ref = signal.savgol_filter(x, 11, 3, deriv=1, delta=0.002, axis=0)
    np.testing.assert_allclose(C.derivative(x, 0.002, "savgol", 11), ref, atol=1e-12)


def test_central_difference_exact_on_quadratic():
    # second-order central differences are exact for quadratics, ends included (edge_order=2)
    t = np.linspace(0, 1, 101)
    x = 3 * t**2 - 2 * t + 1
    np.testing.assert_allclose(C.derivative(x, t[1] - t[0]), 6 * t - 2, atol=1e-10)


def test_periodic_filter_and_derivative_have_no_edge_effects():
    L = 2000
    t = np.arange(L) / FS
    w = 2 * np.pi / (L / FS)
    q = np.sin(3 * w * t)
    qf = C.lowpass(q, FS, 10.0, periodic=True)
    v, a = C.derivatives(qf, 1 / FS, periodic=True)
    np.testing.assert_allclose(qf, q, atol=1e-6)
    np.testing.assert_allclose(a, -(3 * w) ** 2 * q, atol=1e-3 * (3 * w) ** 2)


def test_period_average_noise_variance():
    rng = np.random.default_rng(11)
    L, P, sd = 500, 20, np.array([0.05, 0.2])
    base = np.sin(np.linspace(0, 2 * np.pi, L, endpoint=False))[:, None] * [1.0, 3.0]
    x = np.tile(base, (P, 1)) + sd * rng.standard_normal((L * P, 2))
    mean, var, n = C.period_average(np.vstack([x, x[:123]]), L)  # a partial period at the end is ignored
    assert n == P
    # the variance estimate has (P-1) L degrees of freedom: relative sd sqrt(2 / 9500) ~ 1.5 %
    np.testing.assert_allclose(var, sd**2, rtol=0.06)
    # averaging P periods divides the noise variance by P
    np.testing.assert_allclose(np.var(mean - base, axis=0), sd**2 / P, rtol=0.15)
    with pytest.raises(DataError, match="two whole periods"):
        C.period_average(x[: L + 10], L)


def test_delay_estimate_recovers_sub_sample_delay():
    rng = np.random.default_rng(5)
    dt = 1e-3
    t = np.arange(0, 10, dt)
    true = np.array([0.0034, -0.0012, 0.0])
    pred = np.stack([np.sin(2 * np.pi * f * t) + 0.5 * np.sin(2 * np.pi * 3.1 * f * t) for f in (0.7, 1.3, 2.1)], 1)
    meas = np.stack([np.interp(t - d, t, pred[:, j]) for j, d in enumerate(true)], 1)
    meas += 0.01 * rng.standard_normal(meas.shape)
    est = C.estimate_delay(meas, pred, dt, max_delay=0.02)
    np.testing.assert_allclose(est, true, atol=5e-5)  # 1/20 of a sample
    # applying the estimate realigns the channels
    fixed, valid = C.shift(t, meas, est)
    assert np.sqrt(np.mean((fixed - pred)[valid] ** 2)) < 0.012
    # segment lists give the same answer as one array
    est2 = C.estimate_delay([meas[:5000], meas[5000:]], [pred[:5000], pred[5000:]], dt, 0.02)
    np.testing.assert_allclose(est2, true, atol=5e-5)


def test_delay_estimate_reports_trouble():
    with pytest.raises(NumericalError):
        C.estimate_delay(np.ones((100, 1)), np.ones((100, 1)), 1e-3, 0.01)
    with pytest.raises(DataError, match="shape"):
        C.estimate_delay(np.ones((100, 2)), np.ones((100, 1)), 1e-3)


def test_bad_settings_raise_data_error():
    with pytest.raises(DataError, match="Nyquist"):
        C.lowpass_sos(100.0, 60.0)
    with pytest.raises(DataError, match="cutoff"):
        C.lowpass_sos(100.0, -1.0)
    with pytest.raises(DataError, match="Nyquist frequency is below the cutoff"):
        C.decimate(np.zeros((100, 1)), 10, fs=100.0, cutoff=20.0)
    with pytest.raises(DataError, match="method"):
        C.derivative(np.zeros(10), 0.1, "spline")
    with pytest.raises(DataError, match="odd"):
        C.derivative(np.zeros(100), 0.1, "savgol", 8)
    assert C.decimate(np.arange(10), 3, fs=100.0, cutoff=10.0).tolist() == [0, 3, 6, 9]


def test_default_cutoff_is_documented_ratio():
    # common practice: cutoff 5-10x the highest excited frequency; we take 5x
    assert C.CUTOFF_RATIO == 5.0
    assert C.default_cutoff(2.0) == 10.0
    with pytest.raises(DataError):
        C.default_cutoff(0.0)
