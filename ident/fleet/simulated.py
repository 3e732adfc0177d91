"""A simulated fleet for examples, tests and benchmarks: many arms of one description, routine logs.

Every arm runs the same periodic routine (a Fourier motion inside the joint limits) once per log,
simulated in closed loop by :func:`ident.motion.simulate.simulate` (tracking controller, friction,
armature, encoder quantization, torque noise). Each arm has its own as-built values: every body's
10 parameters scaled by ``1 + spread * u`` (a positive scale keeps the body physical) and every
joint's friction and armature by ``1 + spread * u``, u standard normal from the arm's seed. Wear is a
linear rise of one friction parameter of one joint over the periods: ``drift = {arm index:
(joint index, "fv" or "fc", total relative rise)}``, reached in the last period.

Writes ``<folder>/<arm>/<date>_<k>.parquet`` logs, the routine's ``coefficients.yaml`` and a
``catalog.csv`` (arm, time, log, description, excitation), and returns the truths.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..arm.loader import load_robot
from ..fileio import atomic_path
from ..motion.fourier import FourierTrajectory, save_trajectory
from ..motion.simulate import SimulationSettings, simulate

#: As-built joint terms of the routine fleet (invented): viscous N m s/rad, Coulomb N m, armature kg m^2,
#: scaled from the first joint's values down the arm by the joints' effort limits.
FRICTION = {"fv": 0.4, "fc": 0.8, "ia": 0.05}


@dataclass
class FleetSpec:
    """Size and timing of a simulated fleet (SI units; dates as ISO strings)."""

    arms: int = 8
    periods: int = 6
    logs_per_period: int = 1
    start: str = "2026-01-05"
    days_between: int = 7
    period: float = 4.0
    harmonics: int = 3
    cycles: int = 4
    control_rate: float = 100.0
    log_rate: float = 50.0
    substeps: int = 2
    spread: float = 0.05
    seed: int = 0


def routine(robot, spec: FleetSpec) -> FourierTrajectory:
    """The fleet's routine motion: a seeded Fourier motion over 40 % of each joint's range."""
    rng = np.random.default_rng(1000 + spec.seed)
    n, w, H = robot.n, 2 * np.pi / spec.period, spec.harmonics
    lo = np.where(np.isfinite(robot.lower), robot.lower, -np.pi)
    hi = np.where(np.isfinite(robot.upper), robot.upper, np.pi)
    mid = 0.5 * (lo + hi)
    amp = 0.4 * (hi - lo) / 2 / H
    k = np.arange(1, H + 1)
    a = rng.uniform(-1, 1, (n, H)) * amp[:, None] * w * k
    b = rng.uniform(-1, 1, (n, H)) * amp[:, None] * w * k
    return FourierTrajectory.from_coefficients(robot.joint_names, spec.period, np.hstack([mid[:, None], a, b]), mid)


def joint_terms(robot) -> dict:
    """The fleet's nominal joint terms {code: (n,)}, scaled by each joint's effort limit."""
    eff = np.where(np.isfinite(robot.effort_limit) & (robot.effort_limit > 0), robot.effort_limit, 1.0)
    scale = eff / eff[0]
    return {c: v * scale for c, v in FRICTION.items()}


def make_fleet(folder, description, spec: FleetSpec | None = None, drift: dict | None = None, torque_noise=None,
               selection: dict | None = None) -> dict:
    """Simulate a fleet into `folder` (see the module notes); returns {"catalog": path, "truth":
    {arm: [per period {"inertial", "joint_params"}]}, "arms": [ids]}.

    torque_noise : per-joint std of the logged torque, N m (default 0.25 % of each effort limit).
    selection : :func:`ident.arm.loader.load_robot` keywords (joints, locked, gravity) of the arms.
    """
    spec = spec or FleetSpec()
    drift = drift or {}
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    robot = load_robot(description, **(selection or {}))
    traj = routine(robot, spec)
    save_trajectory(folder / "coefficients.yaml", traj)
    t, q, dq, ddq = traj.sample(spec.control_rate, spec.cycles)
    t, q, dq, ddq = t[:-1], q[:-1], dq[:-1], ddq[:-1]
    eff = np.where(np.isfinite(robot.effort_limit) & (robot.effort_limit > 0), robot.effort_limit, 10.0)
    noise = np.asarray(torque_noise, float) if torque_noise is not None else 0.0025 * eff
    nominal = joint_terms(robot)
    rows, truth, arms = [], {}, []
    for a in range(spec.arms):
        arm = f"arm{a + 1:02d}"
        arms.append(arm)
        rng = np.random.default_rng(spec.seed * 7919 + a)
        body = np.clip(1 + spec.spread * rng.standard_normal(robot.n), 0.5, 1.5)
        inertial = robot.prior * body[:, None]
        own = {c: v * np.clip(1 + 2 * spec.spread * rng.standard_normal(robot.n), 0.5, 1.5) for c, v in nominal.items()}
        truth[arm] = []
        for p in range(spec.periods):
            jp = {c: v.copy() for c, v in own.items()}
            if a in drift:
                j, code, rise = drift[a]
                jp[code][j] *= 1 + rise * p / max(spec.periods - 1, 1)
            truth[arm].append({"inertial": inertial, "joint_params": jp})
            day = pd.Timestamp(spec.start) + pd.Timedelta(days=spec.days_between * p)
            for k in range(spec.logs_per_period):
                settings = SimulationSettings(log_rate=spec.log_rate, substeps=spec.substeps, torque_noise=noise,
                                              encoder_counts=2**16, seed=int(spec.seed * 100_003 + a * 1009 + p * 31 + k))
                sim = simulate(robot, t, q, dq, ddq, inertial, jp, settings)
                path = folder / arm / f"{day.date()}_{k}.parquet"
                path.parent.mkdir(parents=True, exist_ok=True)
                with atomic_path(path) as tmp:
                    pd.DataFrame(sim.columns()).to_parquet(tmp)
                rows.append({"arm": arm, "time": str(day + pd.Timedelta(hours=8 + k)), "log": f"{arm}/{path.name}",
                             "description": str(Path(description).resolve()), "excitation": "coefficients.yaml"})
    cat = folder / "catalog.csv"
    pd.DataFrame(rows).to_csv(cat, index=False)
    return {"catalog": cat, "truth": truth, "arms": arms}
