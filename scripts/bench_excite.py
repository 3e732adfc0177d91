"""Benchmark of `ident excite`: criterion reached in 60 s versus in a long (10-minute) run.

Design for the 6-joint arm of example-robot-data (UR5 description), 5 harmonics, friction terms
(viscous and Coulomb) included, a table-plane keep-out. Target: the 60 s run reaches a condition
number within 10 % of the long run's. Both runs share the per-start time (15 s a start), so the
long run simply tries more starts.

    python scripts/bench_excite.py              # 60 s and 600 s runs
    python scripts/bench_excite.py --long 120   # quick check with a shorter long run
"""

from __future__ import annotations

import argparse
import importlib.metadata
import time
from pathlib import Path

import ident
from ident.motion.design import ExcitationResult, design_excitation


def ur5_path() -> Path:
    dist = importlib.metadata.distribution("example-robot-data")
    return Path(dist.locate_file("cmeel.prefix/share/example-robot-data/robots/ur_description/urdf/ur5_robot.urdf"))


def config(budget: float, seed: int) -> dict:
    return {
        "period": 10.0,
        "harmonics": 5,
        "rate": 500.0,
        "home": [0.0, -1.57, 1.57, -1.57, -1.57, 0.0],
        "terms": "fv,fc",
        "criterion": "cond",
        "limits": {"position_margin": 0.1, "velocity_scale": 0.6, "acceleration": [3.0, 3.0, 3.0, 5.0, 5.0, 5.0], "torque_scale": 0.7},
        "keepout": {
            "points": [{"name": "flange", "link": "wrist_3_link"}, {"name": "tip", "link": "tool0", "point": [0, 0, 0.1]}, {"name": "elbow", "link": "forearm_link"}],
            "regions": [{"name": "table", "type": "plane", "point": [0, 0, 0], "normal": [0, 0, 1], "margin": 0.05}],
        },
        "optimizer": {"seed": seed, "starts": max(1, int(round(budget / 15.0))), "budget": budget, "max_iterations": 300},
    }


def run(robot, budget: float, seed: int) -> tuple[float, float, ExcitationResult]:
    t0 = time.perf_counter()
    res = design_excitation(robot, config(budget, seed), progress=True)
    return time.perf_counter() - t0, res.criteria["cond"], res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--short", type=float, default=60.0, help="budget of the short run, s (default 60)")
    ap.add_argument("--long", type=float, default=600.0, help="budget of the long run, s (default 600)")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    robot = ident.load_robot(ur5_path())
    design_excitation(robot, {**config(5.0, args.seed), "optimizer": {"starts": 1, "budget": 5.0, "max_iterations": 2}})  # compile kernels, fill caches
    t_s, c_s, r_s = run(robot, args.short, args.seed)
    t_l, c_l, r_l = run(robot, args.long, args.seed)
    print(f"robot {robot.name}: {robot.n} joints, 5 harmonics, terms fv,fc, {len(r_s.base_names)} base parameters, table keep-out")
    print(f"short run: budget {args.short:g} s, {len(r_s.starts)} starts, wall {t_s:.1f} s, cond {c_s:.4g}, logdet {r_s.criteria['logdet']:.5g}")
    print(f"long run:  budget {args.long:g} s, {len(r_l.starts)} starts, wall {t_l:.1f} s, cond {c_l:.4g}, logdet {r_l.criteria['logdet']:.5g}")
    ratio = c_s / c_l
    print(f"short / long condition number: {ratio:.3f} (target <= 1.10: {'met' if ratio <= 1.10 else 'NOT met'}); short run under 60 s: {'yes' if t_s < 60 else 'no'}")


if __name__ == "__main__":
    main()
