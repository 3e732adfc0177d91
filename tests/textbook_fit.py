"""The "textbook script": the identification a practitioner writes by hand, as a baseline for tests.

Plain numpy/scipy, with only the regressor and the base-parameter set taken from ident:

1. 4th-order Butterworth low-pass at 15 Hz run forwards and backwards (``scipy.signal.filtfilt``)
   on the positions and on the torques (common practice);
2. velocities and accelerations by central differences (``np.gradient``) of the filtered positions;
3. every joint equation whose joint moves slower than 0.2 rad/s is dropped, because the Coulomb
   term sign(q') is unreliable there (common practice);
4. ordinary least squares on the base regressor with viscous, Coulomb (sign(q')) and armature
   terms, no weighting, no constraints, no period averaging.

Used by tests and ``scripts/eval_second_plant.py`` (import it as ``textbook_fit``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

import ident

TERMS = ("fv", "fc", "ia")
CUTOFF = 15.0  # Hz
ORDER = 4
SLOW = 0.2  # rad/s


@dataclass
class TextbookModel:
    """Result of :func:`textbook_fit`: base parameters ``beta`` (b,) of ``base`` with ``terms``."""

    robot: ident.Robot
    base: ident.BaseParameters
    terms: tuple
    beta: np.ndarray
    rows: int

    def predict(self, q, dq, ddq) -> np.ndarray:
        """Torque (N, n) N m at (N, n) states: Y_b(q, q', q'') beta."""
        return self.base.columns(ident.regressor(self.robot, q, dq, ddq, self.terms)) @ self.beta

    def joint_term(self, code: str) -> np.ndarray:
        """(n,) estimate of a joint term (fv, fc) where it is a base parameter of its own, else NaN."""
        out = np.full(self.robot.n, np.nan)
        for i, j in enumerate(self.robot.joint_names):
            name = f"{j}.{code}"
            if name in self.base.names:
                out[i] = self.beta[self.base.names.index(name)]
        return out


def read_log(path, joint_names):
    """t (N,) s, q and tau (N, n) from a CSV log in the default table convention."""
    import pandas as pd

    df = pd.read_csv(path)
    return (df["time"].to_numpy(float), df[[f"{j}.q" for j in joint_names]].to_numpy(float),
            df[[f"{j}.tau" for j in joint_names]].to_numpy(float))


def condition(t, q, tau, cutoff: float = CUTOFF, order: int = ORDER):
    """Filtered q, central-difference dq and ddq, filtered tau (each (N, n)) of a raw log."""
    dt = float(np.mean(np.diff(t)))
    b, a = signal.butter(order, cutoff, fs=1.0 / dt)
    qf = signal.filtfilt(b, a, q, axis=0)
    tauf = signal.filtfilt(b, a, tau, axis=0)
    dq = np.gradient(qf, dt, axis=0)
    ddq = np.gradient(dq, dt, axis=0)
    return qf, dq, ddq, tauf


def textbook_fit(robot: ident.Robot, t, q, tau, cutoff: float = CUTOFF, slow: float = SLOW) -> TextbookModel:
    """Fit base parameters by OLS from a raw log: t (N,) s, q (N, n) rad, tau (N, n) N m."""
    qf, dq, ddq, tauf = condition(t, q, tau, cutoff)
    base = ident.base_parameters(robot, TERMS)
    Yb = base.columns(ident.regressor(robot, qf, dq, ddq, TERMS))  # (N, n, b)
    keep = np.abs(dq) >= slow  # (N, n): one flag per joint equation
    A = Yb[keep]
    y = tauf[keep]
    beta, *_ = np.linalg.lstsq(A, y, rcond=None)
    return TextbookModel(robot, base, TERMS, beta, int(keep.sum()))
