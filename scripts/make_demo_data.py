"""Regenerate the demo data in datasets_demo/ (and its packaged copy in ident/demo_data/).

The scenario (our own): `sprout6`, a bench-top 6-joint arm that moves seedling trays in a
greenhouse. Its URDF (datasets_demo/sprout6.urdf) holds the CAD values. The *as-built* arm differs:
cable looms along the upper arm and forearm, heavier wrist motors, grease in the gearboxes and a
gripper with a suction manifold. Those true values go to sprout6_truth.yaml; the logs come from
``ident simulate`` (closed loop, friction, armature, 20-bit encoders, torque noise) with fixed seeds:

* sprout6_excite.csv  : 3 periods of a 10 s, 5-harmonic Fourier excitation, logged at 200 Hz
* sprout6_heldout.csv : 3 periods of a different 8 s, 4-harmonic motion, logged at 200 Hz

Run from the repository root:  python scripts/make_demo_data.py
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import ident  # noqa: E402
from ident.fileio import write_text  # noqa: E402
from ident.paramfile import parameter_set_from_vector, save_parameters  # noqa: E402
from ident.spatial import to_vector, from_vector  # noqa: E402

DEMO = ROOT / "datasets_demo"
PACKAGED = ROOT / "ident" / "demo_data"
URDF = DEMO / "sprout6.urdf"
CONTROL_RATE = 1000.0  # Hz, trajectory and controller
LOG_RATE = 200.0  # Hz
#: Torque-noise std per joint (N m): about 0.5 % of each joint's effort limit (an invented drive).
TORQUE_NOISE = [0.2, 0.2, 0.1, 0.04, 0.04, 0.03]
#: As-built joint terms: viscous N m s/rad, Coulomb N m, armature kg m^2 (gear ratio^2 x rotor inertia).
FRICTION_V = [0.55, 0.70, 0.35, 0.10, 0.09, 0.06]
FRICTION_C = [1.10, 1.40, 0.75, 0.28, 0.24, 0.18]
ARMATURE = [0.12, 0.12, 0.06, 0.016, 0.015, 0.010]
SEEDS = {"excite": 11, "heldout": 23}


def as_built(robot: ident.Robot) -> np.ndarray:
    """True inertial parameters (n, 10): the CAD values with the as-built additions (our invention)."""
    m, c, I = from_vector(robot.prior)
    add = {  # body: (extra mass kg, where it sits in the body frame m)
        "upper_arm": (0.35, [0.0, 0.03, 0.17]),  # cable loom
        "forearm": (0.22, [0.15, 0.02, 0.025]),  # cable loom and elbow connector
        "wrist_housing": (0.08, [0.02, 0.0, 0.01]),  # heavier motor
        "wrist_knuckle": (0.06, [0.03, 0.0, 0.0]),
        "flange": (0.18, [0.06, -0.01, 0.02]),  # suction manifold on the gripper
    }
    out = robot.prior.copy()
    for k, body in enumerate(robot.body_names):
        pi = to_vector(m[k], c[k], I[k] * 1.04)  # grease and bolts: a few per cent more inertia
        if body in add:
            dm, p = add[body]
            # a small solid sphere of radius 2 cm at p
            pi = pi + to_vector(dm, np.array(p), np.eye(3) * 0.4 * dm * 0.02**2)
        out[k] = pi
    return out


def fourier(joints: int, period: float, harmonics: int, lower, upper, vmax, seed: int, t: np.ndarray):
    """A Fourier-series reference (our own quick design) scaled into 85 % of the position range and 70 % of the velocity limits."""
    rng = np.random.default_rng(seed)
    wf = 2 * np.pi / period
    l = np.arange(1, harmonics + 1)
    a = rng.normal(size=(joints, harmonics)) / l
    b = rng.normal(size=(joints, harmonics)) / l
    arg = wf * np.outer(t, l)  # (K, H)
    s, c = np.sin(arg), np.cos(arg)
    q = s @ (a / (wf * l)).T - c @ (b / (wf * l)).T
    dq = c @ a.T + s @ b.T
    ddq = -s @ (a * wf * l).T + c @ (b * wf * l).T
    centre = 0.5 * (lower + upper)
    half = 0.5 * (upper - lower)
    span = np.ptp(q, axis=0) / 2
    mid = 0.5 * (q.max(axis=0) + q.min(axis=0))
    scale = np.minimum(0.7 * half / span, 0.7 * vmax / np.abs(dq).max(axis=0))
    q = centre + 0.15 * half * np.sin(np.arange(joints)) + scale * (q - mid)
    return q, scale * dq, scale * ddq


def write_trajectory(path: Path, names, t, q, dq, ddq) -> None:
    cols = ["time"] + [f"{j}.{s}" for s in ("q", "dq", "ddq") for j in names]
    data = np.column_stack([t, q, dq, ddq])
    lines = [",".join(cols)] + [",".join(f"{v:.12g}" for v in row) for row in data]
    write_text(path, "\n".join(lines) + "\n")


def main() -> int:
    robot = ident.load_robot(URDF)
    n = robot.n
    truth = parameter_set_from_vector(
        robot,
        np.concatenate([as_built(robot).ravel(), np.column_stack([FRICTION_V, FRICTION_C, ARMATURE]).ravel()]),
        ("fv", "fc", "ia"),
        method={"name": "truth", "note": "as-built sprout6 used to simulate the demo logs (invented)"},
        data={"torque_noise_std": dict(zip(robot.joint_names, TORQUE_NOISE))},
    )
    save_parameters(DEMO / "sprout6_truth.yaml", truth)
    lower = np.maximum(robot.lower, -2.5)
    upper = np.minimum(robot.upper, 2.5)
    plans = {"excite": (10.0, 5), "heldout": (8.0, 4)}
    with tempfile.TemporaryDirectory() as tmp:
        for name, (period, harmonics) in plans.items():
            t = np.arange(int(round(3 * period * CONTROL_RATE))) / CONTROL_RATE
            q, dq, ddq = fourier(n, period, harmonics, lower, upper, robot.velocity_limit, SEEDS[name], t)
            traj = Path(tmp) / f"{name}_reference.csv"
            write_trajectory(traj, robot.joint_names, t, q, dq, ddq)
            cmd = [sys.executable, "-m", "ident", "simulate", str(URDF), "--trajectory", str(traj),
                   "--truth", str(DEMO / "sprout6_truth.yaml"), "--out", str(DEMO / f"sprout6_{name}.csv"),
                   "--log-rate", str(LOG_RATE), "--torque-noise", ",".join(map(str, TORQUE_NOISE)),
                   "--seed", str(SEEDS[name])]
            print(" ".join(cmd[2:]))
            subprocess.run(cmd, check=True, cwd=ROOT)
    PACKAGED.mkdir(exist_ok=True)
    for f in ("sprout6.urdf", "sprout6_truth.yaml", "sprout6_excite.csv", "sprout6_heldout.csv"):
        shutil.copyfile(DEMO / f, PACKAGED / f)
    print(f"wrote {DEMO} and its packaged copy {PACKAGED}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
