"""Regenerate the demo data in datasets_demo/ (and its packaged copy in ident/demo_data/).

The scenario (our own): `sprout6`, a bench-top 6-joint arm that moves seedling trays in a
greenhouse. Its URDF (datasets_demo/sprout6.urdf) holds the CAD values. The *as-built* arm differs:
cable looms along the upper arm and forearm, heavier wrist motors, grease in the gearboxes and a
gripper with a suction manifold. Those true values go to sprout6_truth.yaml; the logs come from
``ident simulate`` (closed loop, friction, armature, 20-bit encoders, torque noise) with fixed seeds:

* sprout6_excite.csv  : 3 periods of the 10 s, 5-harmonic excitation that ``ident excite`` designs
  from sprout6_excite_config.yaml (optimized condition number), logged at 200 Hz
* sprout6_heldout.csv : 3 periods of a different motion (8 s, 4 harmonics, another seed, same
  limits and keep-out regions), logged at 200 Hz

Both trajectories come from ``ident excite`` with iteration caps and a generous time budget, so
they are the same on every run (the optimizer is deterministic when the budget is not reached).

Run from the repository root:  python scripts/make_demo_data.py
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import ident  # noqa: E402
from ident.arm.parameters import parameter_set_from_vector
from ident.arm.spatial import from_vector, to_vector  # noqa: E402
from ident.handover.paramfile import save_parameters  # noqa: E402

DEMO = ROOT / "datasets_demo"
PACKAGED = ROOT / "ident" / "demo_data"
URDF = DEMO / "sprout6.urdf"
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


def run(args: list[str]) -> None:
    """Run one ident command in a child process, echoing it."""
    print("ident " + " ".join(Path(a).name if "/" in a else a for a in args), flush=True)
    subprocess.run([sys.executable, "-m", "ident", *args], check=True, cwd=ROOT)


def main() -> int:
    robot = ident.load_robot(URDF)
    truth = parameter_set_from_vector(
        robot,
        np.concatenate([as_built(robot).ravel(), np.column_stack([FRICTION_V, FRICTION_C, ARMATURE]).ravel()]),
        ("fv", "fc", "ia"),
        method={"name": "truth", "note": "as-built sprout6 used to simulate the demo logs (invented)"},
        data={"torque_noise_std": dict(zip(robot.joint_names, TORQUE_NOISE))},
    )
    save_parameters(DEMO / "sprout6_truth.yaml", truth)
    config = yaml.safe_load((DEMO / "sprout6_excite_config.yaml").read_text())
    held_config = dict(config, period=8.0, harmonics=4, optimizer=dict(config["optimizer"], seed=5))
    with tempfile.TemporaryDirectory() as tmp:
        for name, cfg in (("excite", config), ("heldout", held_config)):
            cfg_path = Path(tmp) / f"{name}_config.yaml"
            cfg_path.write_text(yaml.safe_dump(cfg, sort_keys=False))
            design = Path(tmp) / name
            run(["excite", str(URDF), "--config", str(cfg_path), "--out", str(design)])
            run(["simulate", str(URDF), "--trajectory", str(design / "trajectory.csv"),
                 "--truth", str(DEMO / "sprout6_truth.yaml"), "--out", str(DEMO / f"sprout6_{name}.csv"),
                 "--log-rate", str(LOG_RATE), "--torque-noise", ",".join(map(str, TORQUE_NOISE)),
                 "--seed", str(SEEDS[name])])
    PACKAGED.mkdir(exist_ok=True)
    for f in ("sprout6.urdf", "sprout6_truth.yaml", "sprout6_excite.csv", "sprout6_heldout.csv"):
        shutil.copyfile(DEMO / f, PACKAGED / f)
    print(f"wrote {DEMO} and its packaged copy {PACKAGED}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
