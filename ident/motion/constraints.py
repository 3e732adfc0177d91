"""Constraint margins of a trajectory, checked on sampled time grids: joint positions (with a margin),
velocities, accelerations, torques of the prior model (the description's inertial values plus
optional friction/armature guesses), and keep-out regions for chosen points on chosen links.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..arm.dynamics import frame_pose, inverse_dynamics, joint_term_torque
from ..arm.model import Robot
from .config import ExcitationConfig
from .fourier import FourierTrajectory
from .keepout import KeepoutPoint, Region

#: Length scale that normalizes keep-out violations in the penalty (m).
_KEEPOUT_SCALE = 0.1


#: Relative cushion on torque limits and absolute cushion on keep-out distances (m) for excursions
#: between check samples (kinematic limits get an analytic cushion instead).
_TORQUE_CUSHION = 2e-3


_KEEPOUT_CUSHION = 1e-3


@dataclass
class Margins:
    """Smallest margins to each limit over a set of samples (positive: inside the limit).

    position_lower/upper, velocity, acceleration, torque : (n,) in the joint's units, after the
    configured position margin (a value >= 0 means the margin is respected).
    keepout : {region name: (smallest distance beyond the region's margin (m), point name, time (s))}.
    peak_velocity, peak_acceleration, peak_torque : (n,) largest magnitudes.
    """

    position_lower: np.ndarray
    position_upper: np.ndarray
    velocity: np.ndarray
    acceleration: np.ndarray
    torque: np.ndarray
    keepout: dict
    peak_velocity: np.ndarray
    peak_acceleration: np.ndarray
    peak_torque: np.ndarray

    def violations(self, joint_names: list[str], units: list[str] | None = None) -> list[str]:
        """Readable list of violated constraints (empty when every constraint holds)."""
        out = []
        for label, arr in (("position (lower)", self.position_lower), ("position (upper)", self.position_upper), ("velocity", self.velocity), ("acceleration", self.acceleration), ("torque", self.torque)):
            for j in np.flatnonzero(arr < 0):
                out.append(f"{label} limit of joint '{joint_names[j]}' exceeded by {-arr[j]:.4g}")
        for name, (dist, pt, t) in self.keepout.items():
            if dist < 0:
                out.append(f"point '{pt}' enters keep-out region '{name}' (by {-dist:.4g} m beyond its margin at t = {t:.3f} s)")
        return out


def prior_torque(robot: Robot, cfg: ExcitationConfig, q, dq, ddq, Y=None) -> np.ndarray:
    """Torque (N, n) of the prior model: description inertial values plus ``cfg.torque_model``.

    `Y` (N, n, 10 n) is an inertial regressor already computed at these states (saves a pass).
    """
    if Y is None:
        return inverse_dynamics(robot, q, dq, ddq, joint_params=cfg.torque_model or None)
    tau = Y @ robot.prior.reshape(-1)
    if cfg.torque_model:
        tau += joint_term_torque(robot, dq, ddq, cfg.torque_model)
    return tau


def keepout_distances(robot: Robot, cfg: ExcitationConfig, q) -> list[tuple[Region, KeepoutPoint, np.ndarray]]:
    """Signed distances beyond each region's margin, per (region, watched point): list of (N,) m."""
    out = []
    if not cfg.regions:
        return out
    pos = {p.name: frame_pose(robot, q, p.link, p.point)[1] for p in cfg.points}
    for reg in cfg.regions:
        for pt in cfg.points:
            if reg.points is None or pt.name in reg.points:
                d, _ = reg.distance(pos[pt.name])
                out.append((reg, pt, d - reg.margin))
    return out


def check_trajectory(robot: Robot, cfg: ExcitationConfig, traj: FourierTrajectory, t, cushion: bool = True) -> Margins:
    """Margins of `traj` to every constraint of `cfg` at times `t` (N,) s.

    With `cushion`, kinematic margins are reduced by an analytic bound on how far the motion can
    go beyond its sampled extremes between samples (|f''| dt^2 / 8 with the series' derivative
    bounds), torque margins by a relative 0.2 % and keep-out margins by 1 mm.
    """
    t = np.asarray(t, dtype=float)
    q, dq, ddq = traj.evaluate(t)
    tau = prior_torque(robot, cfg, q, dq, ddq)
    dt = float(np.max(np.diff(np.sort(t)))) if t.size > 1 else 0.0
    bounds = traj.derivative_bounds()
    lo = cfg.lower + cfg.position_margin
    hi = cfg.upper - cfg.position_margin
    pad = (dt**2 / 8.0) * bounds if cushion else np.zeros_like(bounds)  # rows: for q, q', q''
    with np.errstate(invalid="ignore"):
        m_lo = np.where(np.isfinite(lo), q.min(axis=0) - lo - pad[1], np.inf)
        m_hi = np.where(np.isfinite(hi), hi - q.max(axis=0) - pad[1], np.inf)
    m_v = cfg.velocity - np.abs(dq).max(axis=0) - pad[2]
    m_a = cfg.acceleration - np.abs(ddq).max(axis=0) - pad[3]
    tlim = cfg.torque * (1.0 - (_TORQUE_CUSHION if cushion else 0.0))
    m_t = np.where(np.isfinite(cfg.torque), tlim - np.abs(tau).max(axis=0), np.inf)
    ko = {}
    for reg, pt, d in keepout_distances(robot, cfg, q):
        k = int(np.argmin(d))
        val = float(d[k]) - (_KEEPOUT_CUSHION if cushion else 0.0)
        if reg.name not in ko or val < ko[reg.name][0]:
            ko[reg.name] = (val, pt.name, float(t[k]))
    return Margins(m_lo, m_hi, m_v, m_a, m_t, ko, np.abs(dq).max(axis=0), np.abs(ddq).max(axis=0), np.abs(tau).max(axis=0))


def feasible(m: Margins) -> bool:
    arrs = (m.position_lower, m.position_upper, m.velocity, m.acceleration, m.torque)
    return all(np.all(a >= 0) for a in arrs) and all(v[0] >= 0 for v in m.keepout.values())
