"""Benchmark of `ident excite`: criterion reached with the default budget (15 s) versus a long run.

Designs for two arms of example-robot-data, 5 harmonics, friction terms (viscous and Coulomb)
included, a table-plane keep-out: the 6-joint UR5 description and the 7-joint Panda (fingers
locked). The short run is the default optimizer (its starts, its 15 s budget); the long run tries
40 starts under a 600 s budget (it stops earlier when every start has converged). Target: the short
run's condition number within 5 % of the long run's.

    python scripts/bench_excite.py                    # both arms, 15 s and 600 s runs
    python scripts/bench_excite.py --robots ur5       # the UR5 only
    python scripts/bench_excite.py --long 120         # quick check with a shorter long run
"""

from __future__ import annotations

import argparse
import importlib.metadata
import os
import time
from pathlib import Path

import ident
from ident.motion.config import ExcitationConfig
from ident.motion.design import ExcitationResult, design_excitation

SHORT_DEFAULT = ExcitationConfig.__dataclass_fields__["budget"].default


def erd(rel: str) -> Path:
    dist = importlib.metadata.distribution("example-robot-data")
    return Path(dist.locate_file(f"cmeel.prefix/share/example-robot-data/robots/{rel}"))


ARMS = {
    "ur5": {
        "urdf": "ur_description/urdf/ur5_robot.urdf",
        "locked": None,
        "home": [0.0, -1.57, 1.57, -1.57, -1.57, 0.0],
        "acceleration": [3.0, 3.0, 3.0, 5.0, 5.0, 5.0],
        "points": [{"name": "flange", "link": "wrist_3_link"}, {"name": "tip", "link": "tool0", "point": [0, 0, 0.1]}, {"name": "elbow", "link": "forearm_link"}],
    },
    "panda": {
        "urdf": "panda_description/urdf/panda.urdf",
        "locked": {"panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02},
        "home": [0.0, -0.3, 0.0, -2.2, 0.0, 2.0, 0.8],
        "acceleration": [3.0, 3.0, 3.0, 3.0, 5.0, 5.0, 5.0],
        "points": [{"name": "hand", "link": "panda_hand", "point": [0, 0, 0.1]}, {"name": "wrist", "link": "panda_link7"}, {"name": "elbow", "link": "panda_link4"}],
    },
}


def config(arm: str, budget: float | None, seed: int, starts: int | None = None) -> dict:
    a = ARMS[arm]
    opt = {"seed": seed, "budget": budget}
    if starts is not None:
        opt["starts"] = starts
    return {
        "period": 10.0,
        "harmonics": 5,
        "rate": 500.0,
        "home": a["home"],
        "terms": "fv,fc",
        "criterion": "cond",
        "limits": {"position_margin": 0.1, "velocity_scale": 0.6, "acceleration": a["acceleration"], "torque_scale": 0.7},
        "keepout": {
            "points": a["points"],
            "regions": [{"name": "table", "type": "plane", "point": [0, 0, 0], "normal": [0, 0, 1], "margin": 0.05}],
        },
        "optimizer": opt,
    }


def run(robot, arm: str, budget: float, seed: int, starts: int | None = None) -> tuple[float, float, ExcitationResult]:
    t0 = time.perf_counter()
    res = design_excitation(robot, config(arm, budget, seed, starts), progress=True)
    return time.perf_counter() - t0, res.criteria["cond"], res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--short", type=float, default=SHORT_DEFAULT, help=f"budget of the short run, s (default {SHORT_DEFAULT:g}, the optimizer's default)")
    ap.add_argument("--long", type=float, default=600.0, help="budget of the long run, s (default 600)")
    ap.add_argument("--long-starts", type=int, default=40, help="starts of the long run (default 40)")
    ap.add_argument("--robots", default="ur5,panda", help="comma-separated: ur5, panda (default both)")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    print(f"load average at start: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")
    lines = []
    for arm in args.robots.split(","):
        a = ARMS[arm]
        robot = ident.load_robot(erd(a["urdf"]), locked=a["locked"])
        design_excitation(robot, {**config(arm, 5.0, args.seed), "optimizer": {"starts": 1, "budget": 5.0, "max_iterations": 2}})  # compile kernels, fill caches
        t_s, c_s, r_s = run(robot, arm, args.short, args.seed)
        t_l, c_l, r_l = run(robot, arm, args.long, args.seed, args.long_starts)
        ratio = c_s / c_l
        lines += [
            f"{arm} ({robot.n} joints, 5 harmonics, terms fv,fc, {len(r_s.base_names)} base parameters, table keep-out):",
            f"  short run: budget {args.short:g} s, {len(r_s.starts)} starts, wall {t_s:.1f} s, cond {c_s:.4g}, logdet {r_s.criteria['logdet']:.5g}, budget hit: {r_s.budget_hit}",
            f"  long run:  budget {args.long:g} s, {len(r_l.starts)} starts, wall {t_l:.1f} s, cond {c_l:.4g}, logdet {r_l.criteria['logdet']:.5g}, budget hit: {r_l.budget_hit}",
            f"  short / long condition number: {ratio:.3f} (target <= 1.05: {'met' if ratio <= 1.05 else 'NOT met'})",
        ]
    print("\n".join(lines))
    print(f"load average at end: {', '.join(f'{v:.2f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()
