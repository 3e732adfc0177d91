"""``ident export PARAMS --urdf ROBOT --out FILE``: identified parameters into a URDF, or as JSON/YAML."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..errors import IdentError
from ..handover.export import export_parameters, export_urdf
from ..handover.paramfile import load_parameters
from .common import add_robot_arguments, print_json, robot_from_args

EXAMPLE = """\
examples:
  ident export identified.yaml --urdf arm.urdf --out arm_identified.urdf
  ident export identified.yaml --urdf panda.urdf --lock panda_finger_joint1=0.02,panda_finger_joint2=0.02 --out panda_id.urdf
  ident export identified.yaml --urdf arm.urdf --with-friction --out arm_for_simulation.urdf
  ident export identified.yaml --format json --out identified.json

URDF: only the <inertial> elements of the identified links change (COM origin and inertia at the
COM); everything else is kept byte-for-byte. Links merged into one body by fixed or locked joints
get the whole body on the link the joint moves. Physically impossible parameters are refused.
--with-friction writes <dynamics damping="fv" friction="fc"> per joint; the armature has no URDF field.
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "export",
        help="write identified parameters into a URDF, or convert the parameter file to JSON/YAML",
        description="Export a parameter file: into a copy of the robot's URDF with the identified inertial "
        "elements (--urdf), or as JSON or YAML.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("params", metavar="PARAMS", help="parameter file (YAML)")
    p.add_argument("--urdf", metavar="URDF", help="the robot's URDF (the one the parameters were identified for)")
    add_robot_arguments(p, positional=False)
    p.add_argument("--out", required=True, metavar="FILE", help="file to write")
    p.add_argument("--with-friction", action="store_true", help="URDF: also write each joint's <dynamics damping friction> from fv and fc")
    p.add_argument("--format", choices=("urdf", "json", "yaml"), help="output format (default: urdf with --urdf, else from the --out suffix)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print what was written as JSON")
    p.set_defaults(func=run)


def _format(args) -> str:
    if args.format:
        return args.format
    if args.urdf:
        return "urdf"
    suffix = Path(args.out).suffix.lower()
    fmt = {".json": "json", ".yaml": "yaml", ".yml": "yaml", ".urdf": "urdf"}.get(suffix)
    if fmt is None:
        raise IdentError(f"--out: cannot tell the format from '{args.out}'; give --format urdf, json or yaml")
    return fmt


def run(args) -> int:
    fmt = _format(args)
    if fmt == "urdf":
        if not args.urdf:
            raise IdentError("--urdf: URDF export needs the robot's URDF")
        args.robot = args.urdf
        robot = robot_from_args(args)
        ps = load_parameters(args.params, robot)
        export_urdf(args.urdf, robot, ps, args.out, friction=args.with_friction)
        links = [g[0] for g in robot.merged]
    else:
        if args.urdf:
            args.robot = args.urdf
            ps = load_parameters(args.params, robot_from_args(args))
        else:
            ps = load_parameters(args.params)
        export_parameters(ps, args.out, fmt)
        links = list(ps.body_names)
    if args.json:
        print_json({"out": args.out, "format": fmt, "links": links})
    elif not args.quiet:
        what = f"inertial elements of {len(links)} link(s)" if fmt == "urdf" else f"{len(links)} link(s)"
        print(f"wrote {args.out} ({fmt}): {what}")
    return 0
