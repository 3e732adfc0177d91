"""``ident model ROBOT``: what will be identified (joints, bodies, parameter counts, base parameters)."""

from __future__ import annotations

import argparse

import numpy as np

from ..arm.base import base_parameters
from ..arm.model import JOINT_TERMS, PRISMATIC, Robot
from ..intake import seed
from .common import add_robot_arguments, add_terms_argument, format_table, print_json, robot_from_args, terms_from_args

EXAMPLE = """\
examples:
  ident model arm.urdf
  ident model arm.urdf --lock finger_left=0.02,finger_right=0.02 --base
  ident model arm_dh.yaml --base --terms all --format json
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "model",
        help="show the joints, bodies and parameters that will be identified",
        description="Print the identified joints (name, type, axis, limits), the bodies (with the links merged "
        "into each) and the parameter count; with --base, the base (identifiable) parameters and how they regroup.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    add_terms_argument(p)
    p.add_argument("--base", action="store_true", help="also compute and print the base parameters and their regrouping")
    p.add_argument("--seed", type=int, default=0, help="seed of the random states used for the base parameters (default 0)")
    p.add_argument("--format", choices=("text", "json"), default="text", help="output format (default text)")
    p.set_defaults(func=run)


def _lim(x: float) -> str:
    """A limit for the table (units in the table's heading); '-' when the description gives none."""
    return f"{x:.4g}" if np.isfinite(x) else "-"


def describe(robot: Robot, terms) -> dict:
    """JSON-ready description of the model: joints, bodies, locked joints and parameter counts."""
    joints = []
    for i, name in enumerate(robot.joint_names):
        pr = robot.joint_type[i] == PRISMATIC
        joints.append(
            {
                "name": name,
                "type": "prismatic" if pr else ("continuous" if robot.continuous[i] else "revolute"),
                "axis": robot.axis[i].round(12).tolist(),
                "parent_body": robot.body_names[robot.parent[i]] if robot.parent[i] >= 0 else robot.base_name,
                "lower": float(robot.lower[i]) if np.isfinite(robot.lower[i]) else None,
                "upper": float(robot.upper[i]) if np.isfinite(robot.upper[i]) else None,
                "velocity_limit": float(robot.velocity_limit[i]) if np.isfinite(robot.velocity_limit[i]) else None,
                "effort_limit": float(robot.effort_limit[i]) if np.isfinite(robot.effort_limit[i]) else None,
                "units": "m, m/s, N" if pr else "rad, rad/s, N m",
            }
        )
    bodies = [
        {"name": b, "joint": robot.joint_names[i], "merged_links": robot.merged[i], "prior_mass": float(robot.prior[i, 0])}
        for i, b in enumerate(robot.body_names)
    ]
    n_terms = robot.n * len(terms)
    return {
        "robot": robot.name,
        "source": robot.source,
        "base_link": robot.base_name,
        "gravity": robot.gravity.tolist(),
        "joints": joints,
        "bodies": bodies,
        "locked": robot.locked,
        "terms": list(terms),
        "parameters": {"inertial": 10 * robot.n, "joint_terms": n_terms, "total": 10 * robot.n + n_terms},
    }


def run(args) -> int:
    seed(args.seed, "--seed")
    robot = robot_from_args(args)
    terms = terms_from_args(args)
    info = describe(robot, terms)
    base = base_parameters(robot, terms, seed=seed(args.seed, "--seed")) if args.base else None
    if args.format == "json":
        if base is not None:
            info["base"] = base.to_dict()
        print_json(info)
        return 0
    g = ", ".join(f"{v:g}" for v in robot.gravity)
    print(f"robot {robot.name}  ({robot.source_kind} {robot.source})  base link '{robot.base_name}', gravity ({g}) m/s^2")
    print()
    rows = []
    for i, j in enumerate(info["joints"]):
        rows.append(
            [i + 1, j["name"], j["type"], " ".join(f"{a:g}" for a in j["axis"]), j["parent_body"],
             _lim(robot.lower[i]), _lim(robot.upper[i]), _lim(robot.velocity_limit[i]), _lim(robot.effort_limit[i])]
        )
    print(f"identified joints ({robot.n}); limits in rad, rad/s, N m (m, m/s, N for prismatic joints)")
    print(format_table(["#", "joint", "type", "axis", "parent body", "lower", "upper", "velocity", "effort"], rows, "rllllrrrr"))
    print()
    rows = [[i + 1, b["name"], f"{b['prior_mass']:.4g}", ", ".join(b["merged_links"][1:]) or "-"] for i, b in enumerate(info["bodies"])]
    print(f"bodies ({robot.n})")
    print(format_table(["#", "body", "prior mass kg", "merged links"], rows, "rlrl"))
    if robot.locked:
        print()
        print("locked joints: " + ", ".join(f"{k}={v:g}" for k, v in robot.locked.items()))
    print()
    p = info["parameters"]
    term_text = ", ".join(f"{c} ({JOINT_TERMS[c][0]})" for c in terms) or "none"
    print(f"parameters: {p['inertial']} inertial (10 per body) + {p['joint_terms']} joint terms [{term_text}] = {p['total']}")
    if base is not None:
        print()
        print(f"base parameters: {base.n_base} of {base.n_full} (rank tolerance {base.rtol:g}, {base.n_states} random states, seed {base.seed})")
        counts = base.per_joint_terms()
        print("  by kind: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
        rows = [[i + 1, rel.split(" = ")[0], rel.split(" = ", 1)[1] if " = " in rel else "(not regrouped)"] for i, rel in enumerate(base.relations())]
        print(format_table(["#", "base parameter", "regrouping"], rows, "rll"))
        if base.zero.size:
            print()
            print(f"never affect the torque ({base.zero.size}): " + ", ".join(base.full_names[c] for c in base.zero))
    return 0
