"""The excitation's trajectory family: a finite Fourier series per joint (Swevers et al. 1997).

With w = 2 pi / period::

    q_i(t) = q_i0 + sum_l [ a_il / (w l) sin(w l t) - b_il / (w l) cos(w l t) ]

so q', q'' are analytic and the motion is periodic (logs can be averaged over periods). Start and
end at rest at the home pose are three *linear* equations on each joint's coefficients
(q_i(0) = home_i, q_i'(0) = 0, q_i''(0) = 0), plus a fourth when the user fixes the offset q_i0.
The design keeps them exactly by optimizing in their null space, so every period starts and ends
at home with zero velocity and acceleration and no ramp is needed. The coefficients file
regenerates a trajectory exactly.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import yaml

from ..arm.model import Robot
from ..errors import IdentError
from ..fileio import read_yaml, write_text
from .config_values import float_list, period_ticks, positive_number

#: Version tag of the coefficients file.
COEFF_FORMAT = "ident-fourier-trajectory/1"


#: Largest |q(0) - home|, |q'(0)|, |q''(0)| (SI) a re-checked trajectory may have: "at rest" to round-off.
REST_TOLERANCE = 1e-9


def fourier_basis(t, period: float, harmonics: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Basis rows of q, q', q'' at times `t` (N,) s: three (N, 2L + 1) arrays.

    Coefficient layout per joint: ``[q0, a_1..a_L, b_1..b_L]``; ``q(t) = Phi(t) @ x``.
    """
    t = np.asarray(t, dtype=float).reshape(-1)
    w = 2.0 * np.pi / period
    wl = w * np.arange(1, harmonics + 1)
    arg = t[:, None] * wl[None, :]
    s, c = np.sin(arg), np.cos(arg)
    N = t.size
    one, zero = np.ones((N, 1)), np.zeros((N, 1))
    phi = np.hstack([one, s / wl, -c / wl])
    dphi = np.hstack([zero, c, s])
    ddphi = np.hstack([zero, -s * wl, c * wl])
    return phi, dphi, ddphi


@dataclass
class FourierTrajectory:
    """A periodic joint trajectory: per joint an offset and L sine/cosine coefficient pairs.

    Attributes
    ----------
    joint_names : (n,) joint names, in the robot's order.
    period : fundamental period 2 pi / w, s.
    offset : (n,) q_i0, rad or m.
    a, b : (n, L) coefficients of sin and -cos, rad/s or m/s (see the module docstring).
    home : (n,) pose at t = 0 and at every whole period, rad or m.
    """

    joint_names: list[str]
    period: float
    offset: np.ndarray
    a: np.ndarray
    b: np.ndarray
    home: np.ndarray

    @property
    def n(self) -> int:
        """Number of joints."""
        return len(self.joint_names)

    @property
    def harmonics(self) -> int:
        """Number of harmonics L."""
        return self.a.shape[1]

    @property
    def coefficients(self) -> np.ndarray:
        """(n, 2L + 1) coefficient rows ``[q0, a_1..a_L, b_1..b_L]``."""
        return np.hstack([self.offset[:, None], self.a, self.b])

    @classmethod
    def from_coefficients(cls, joint_names, period, X, home) -> "FourierTrajectory":
        """Build from (n, 2L + 1) coefficient rows (see :attr:`coefficients`)."""
        X = np.asarray(X, dtype=float)
        L = (X.shape[1] - 1) // 2
        return cls(list(joint_names), float(period), X[:, 0].copy(), X[:, 1 : 1 + L].copy(), X[:, 1 + L :].copy(), np.asarray(home, dtype=float).copy())

    def evaluate(self, t) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Positions, velocities and accelerations at times `t` (N,) s: three (N, n) arrays (SI)."""
        phi, dphi, ddphi = fourier_basis(t, self.period, self.harmonics)
        X = self.coefficients
        return phi @ X.T, dphi @ X.T, ddphi @ X.T

    def times(self, rate: float, periods: int = 1) -> np.ndarray:
        """Controller sample times k / rate, k = 0 .. periods * period * rate (inclusive), s."""
        ticks = period_ticks(self.period, rate, "rate")
        return np.arange(periods * ticks + 1) / float(rate)

    def sample(self, rate: float, periods: int = 1) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Sample at the controller rate (Hz) over `periods` periods: t (N,), q, dq, ddq (N, n)."""
        t = self.times(rate, periods)
        return (t, *self.evaluate(t))

    def derivative_bounds(self) -> np.ndarray:
        """(4, n) upper bounds of |q'|, |q''|, |q'''|, |q''''| per joint over all time (analytic)."""
        w = 2.0 * np.pi / self.period * np.arange(1, self.harmonics + 1)
        amp = np.hypot(self.a, self.b)  # (n, L)
        return np.stack([amp @ w**k for k in range(4)])

    def to_dict(self) -> dict:
        """The coefficients-file mapping (format :data:`COEFF_FORMAT`)."""
        return {
            "format": COEFF_FORMAT,
            "model": "q(t) = offset + sum_l [sin_l/(w l) sin(w l t) - cos_l/(w l) cos(w l t)], w = 2 pi / period",
            "period": float(self.period),
            "harmonics": int(self.harmonics),
            "joints": {
                name: {
                    "home": float(self.home[i]),
                    "offset": float(self.offset[i]),
                    "sin": [float(v) for v in self.a[i]],
                    "cos": [float(v) for v in self.b[i]],
                }
                for i, name in enumerate(self.joint_names)
            },
        }

    @classmethod
    def from_dict(cls, d: dict, where: str = "coefficients") -> "FourierTrajectory":
        """Inverse of :meth:`to_dict`; errors name `where` and the offending key."""
        if not isinstance(d, dict) or d.get("format") != COEFF_FORMAT:
            raise IdentError(f"{where}: not an excitation coefficients file (expected format: {COEFF_FORMAT})")
        period = positive_number(d.get("period"), f"{where}: period")
        joints = d.get("joints")
        if not isinstance(joints, dict) or not joints:
            raise IdentError(f"{where}: joints: expected a mapping joint -> coefficients")
        L = d.get("harmonics")
        if not isinstance(L, int) or L < 1:
            raise IdentError(f"{where}: harmonics: expected a positive integer, got {L!r}")
        names, rows, home = [], [], []
        for name, c in joints.items():
            key = f"{where}: joints.{name}"
            if not isinstance(c, dict):
                raise IdentError(f"{key}: expected a mapping with home, offset, sin, cos")
            sin = float_list(c.get("sin"), f"{key}.sin", L)
            cos = float_list(c.get("cos"), f"{key}.cos", L)
            off = float_list([c.get("offset")], f"{key}.offset", 1)
            hm = float_list([c.get("home")], f"{key}.home", 1)
            names.append(str(name))
            rows.append(np.concatenate([off, sin, cos]))
            home.append(hm[0])
        return cls.from_coefficients(names, period, np.array(rows), np.array(home))


def save_trajectory(path, traj: FourierTrajectory, extra: dict | None = None) -> None:
    """Write the coefficients file (YAML, atomic); `extra` adds informational keys (robot, rate)."""
    d = traj.to_dict()
    if extra:
        d = {**d, **{k: v for k, v in extra.items() if k not in d}}
    # PyYAML writes floats with repr(), so the file round-trips every coefficient bit for bit.
    write_text(path, yaml.safe_dump(d, sort_keys=False, default_flow_style=None, width=100))


def load_trajectory(path, robot: Robot | None = None) -> FourierTrajectory:
    """Read a coefficients file; with `robot`, its joints must be the robot's, in order."""
    p = Path(path)
    d = read_yaml(p, "coefficients file")
    traj = FourierTrajectory.from_dict(d, str(p))
    if robot is not None and traj.joint_names != robot.joint_names:
        raise IdentError(f"{p}: joints {', '.join(traj.joint_names)} do not match the robot's {', '.join(robot.joint_names)}")
    return traj
