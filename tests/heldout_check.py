"""One held-out comparison for every model fitted on the MuJoCo plant's logs (tests and scripts).

Each model gets the same raw held-out log and is judged the same way, whatever conditioning it
used for its own fit (judging each through its own conditioning would be unfair: a 2.5 Hz
low-pass hides the errors a 15 Hz one shows). No simulation: the prediction is the model's
torque at the logged states, so the comparison needs nothing but the log.

1. common states: the encoder positions through a zero-phase 4th-order Butterworth low-pass at
   ``STATE_CUTOFF`` (50 Hz, 100x the highest excited frequency: it removes the quantization steps,
   not the motion), velocities and accelerations by central differences;
2. the model's torque at those states, sample by sample (Coulomb sign of the common velocity);
3. that predicted torque, and for (a) the measured torque too, through the same zero-phase
   low-pass at ``COMPARE_CUTOFF`` (20 Hz). Torque is linear in the parameters and the low-pass is
   linear, so filtering the predicted torque rather than the states keeps the equality
   F(tau) = F(Y) pi of the true model exactly (parallel filtering) while the acceleration noise
   of the differenced positions goes; 20 Hz keeps the closed loop's response at velocity
   reversals (measured on the UR5, the perfect model's ``all`` figure: 1.00-1.05 sigma at 10 Hz,
   1.00-1.03 at 20 Hz, 1.00-1.09 at 30 Hz, where acceleration noise comes through);
4. ``TRIM`` s are left out at both ends (filter transients).

Figures per joint (N m):

* ``moving``: RMS of F(tau_measured) - F(tau_predicted) over samples where the joint moves faster
  than ``MOVING`` (0.2 rad/s, the textbook script's threshold): model error with the noise
  filtered out, where every friction model agrees on sign(q');
* ``all``: RMS of tau_measured - F(tau_predicted) over every sample; the raw measured torque keeps
  its white noise, so a perfect model scores the noise level sigma (measured: the plant's own
  parameters with its own dry-friction ramp score 1.00-1.03 sigma on every joint, with
  fc sign(q') instead up to 2.3 sigma on the UR5's heavy joints: the low-speed friction shows here).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

STATE_CUTOFF = 50.0  # Hz
COMPARE_CUTOFF = 20.0  # Hz
ORDER = 4
MOVING = 0.2  # rad/s
TRIM = 0.5  # s


def lowpass(x: np.ndarray, cutoff: float, fs: float) -> np.ndarray:
    """Zero-phase Butterworth low-pass (order ORDER, forwards and backwards) along axis 0."""
    b, a = signal.butter(ORDER, cutoff, fs=fs)
    return signal.filtfilt(b, a, x, axis=0)


def common_states(t: np.ndarray, q: np.ndarray):
    """States of a raw log for every model: q, q', q'' (N, n) from the encoder positions (N, n)."""
    dt = float(np.mean(np.diff(t)))
    qs = lowpass(q, STATE_CUTOFF, 1.0 / dt)
    dq = np.gradient(qs, dt, axis=0)
    ddq = np.gradient(dq, dt, axis=0)
    return qs, dq, ddq


@dataclass
class HeldOut:
    """Per-joint RMS torque errors (n,) N m on a held-out log (see the module docstring)."""

    moving: np.ndarray
    all: np.ndarray


def held_out_errors(t, q, tau, predict) -> HeldOut:
    """Judge ``predict(q, dq, ddq) -> (N, n)`` on a raw held-out log: t (N,) s, q, tau (N, n)."""
    fs = 1.0 / float(np.mean(np.diff(t)))
    qs, dq, ddq = common_states(t, q)
    pred = lowpass(predict(qs, dq, ddq), COMPARE_CUTOFF, fs)
    meas = lowpass(tau, COMPARE_CUTOFF, fs)
    k = int(round(TRIM * fs))
    sl = slice(k, len(t) - k)
    speed = np.abs(dq[sl])
    e_filt = (meas - pred)[sl]
    e_raw = (tau - pred)[sl]

    def rms(e, mask):
        return np.array([np.sqrt(np.mean(e[mask[:, j], j] ** 2)) for j in range(e.shape[1])])

    return HeldOut(rms(e_filt, speed > MOVING), rms(e_raw, np.ones_like(speed, dtype=bool)))
