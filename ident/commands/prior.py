"""``ident prior ROBOT --out PARAMS``: a parameter file holding the description's own values."""

from __future__ import annotations

import argparse

import numpy as np

from ..arm.parameters import description_parameters
from ..errors import IdentError
from ..handover.paramfile import save_parameters
from .common import add_robot_arguments, add_terms_argument, print_json, robot_from_args, terms_from_args

EXAMPLE = """\
examples:
  ident prior ur5_robot.urdf --out ur5_prior.yaml
  ident prior panda.urdf --lock panda_finger_joint1=0.02,panda_finger_joint2=0.02 --out panda_prior.yaml
  ident prior arm.urdf --term fv=0.5 --term fc=1.2 --term joint2.fv=0.8 --out as_built.yaml
  ident prior glazer6_dh.yaml --terms fv,fc --out glazer6_prior.yaml

The file holds every body's mass, centre of mass and inertia as the description gives them (links
joined by fixed or locked joints merged, as 'ident fit' sees them), per-joint terms (zero unless
--term sets them) and the context (locks, gravity). Edit it as the prior of 'ident fit --prior' or
as the true model of 'ident simulate --truth'.
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "prior",
        help="write a parameter file with the description's own values (a prior, or a simulation's truth)",
        description="Write the robot description's inertial values (URDF inertials or DH priors), merged the way "
        "identification sees them, as a parameter file, with optional per-joint friction and armature values.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    add_terms_argument(p)
    p.add_argument("--term", action="append", default=[], metavar="[JOINT.]CODE=VALUE",
                   help="a joint-term value for every joint (fv=0.5) or one joint (joint2.fc=1.1); repeatable, later ones win")
    p.add_argument("--out", required=True, metavar="PARAMS", help="parameter file to write (YAML)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print what was written as JSON")
    p.set_defaults(func=run)


def _term_values(items, robot, terms) -> dict:
    vals = {c: np.zeros(robot.n) for c in terms}
    for item in items:
        name, sep, text = item.partition("=")
        joint, dot, code = name.rpartition(".")
        if not sep or not code:
            raise IdentError(f"--term: expected [JOINT.]CODE=VALUE, got '{item}'")
        if code not in vals:
            raise IdentError(f"--term {item}: '{code}' is not among the terms {list(terms)} (see --terms)")
        try:
            v = float(text)
        except ValueError:
            raise IdentError(f"--term {item}: '{text}' is not a number") from None
        if not np.isfinite(v):
            raise IdentError(f"--term {item}: value is not finite")
        if dot:
            vals[code][robot.joint_index(joint)] = v
        else:
            vals[code][:] = v
    return vals


def run(args) -> int:
    robot = robot_from_args(args)
    terms = terms_from_args(args)
    ps = description_parameters(robot, terms, _term_values(args.term, robot, terms))
    save_parameters(args.out, ps)
    if args.json:
        print_json({"out": args.out, "robot": robot.name, "joints": list(robot.joint_names), "terms": list(terms),
                    "locked": dict(robot.locked)})
    elif not args.quiet:
        print(f"wrote {args.out}: the description's values for {robot.n} bodies of {robot.name}"
              + (f", terms {','.join(terms)}" if terms else "") + (f"; locked {', '.join(f'{j}={v:g}' for j, v in robot.locked.items())}" if robot.locked else ""))
    return 0
