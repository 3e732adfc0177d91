"""``ident export PARAMS --urdf ROBOT --out FILE``: identified parameters into a URDF, or as JSON/YAML."""

from __future__ import annotations

import argparse
from pathlib import Path

from ..errors import IdentError
from ..handover.export import export_parameters, export_urdf
from ..handover.inertials import DIGITS
from ..handover.mjcf import export_mjcf
from ..handover.paramfile import load_parameters
from .common import add_robot_arguments, print_json, robot_for_params

EXAMPLE = """\
examples:
  ident export identified.yaml --urdf arm.urdf --out arm_identified.urdf
  ident export identified.yaml --urdf panda.urdf --lock panda_finger_joint1=0.02,panda_finger_joint2=0.02 --out panda_id.urdf
  ident export identified.yaml --urdf arm.urdf --with-friction --out arm_for_simulation.urdf
  ident export identified.yaml --urdf panda.urdf --format mjcf --out panda_identified.xml
  ident export identified.yaml --format json --out identified.json

The joint selection, locks and gravity come from the parameter file (an option that contradicts
it is refused). URDF: only the <inertial> elements of the identified links change (COM origin and
inertia at the COM); everything else is kept byte-for-byte. A body merged from several links
(fixed or locked joints) is split back: the other links keep the description's inertials and the
link the joint moves gets the identified total minus theirs, so joints locked for identification
can move. Links the data cannot see keep the description's values. Numbers have --digits
significant digits (more where rounding would break physical consistency). Physically impossible
parameters are refused. --with-friction writes <dynamics damping="fv" friction="fc"> per joint.
MJCF (MuJoCo): the same inertials plus armature (ia), damping (fv) and frictionloss (fc).
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
    p.add_argument("--format", choices=("urdf", "mjcf", "json", "yaml"), help="output format (default: urdf with --urdf, else from the --out suffix)")
    p.add_argument("--digits", type=int, default=DIGITS, metavar="N", help=f"URDF/MJCF: significant digits of the numbers (default {DIGITS}; 17 reproduces the file exactly)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print what was written as JSON")
    p.set_defaults(func=run)


def _format(args) -> str:
    if args.format:
        return args.format
    if args.urdf and Path(args.out).suffix.lower() in (".xml", ".mjcf"):
        return "mjcf"
    if args.urdf:
        return "urdf"
    suffix = Path(args.out).suffix.lower()
    fmt = {".json": "json", ".yaml": "yaml", ".yml": "yaml", ".urdf": "urdf", ".xml": "mjcf", ".mjcf": "mjcf"}.get(suffix)
    if fmt is None:
        raise IdentError(f"--out: cannot tell the format from '{args.out}'; give --format urdf, json or yaml")
    return fmt


def run(args) -> int:
    fmt = _format(args)
    if not 1 <= args.digits <= 17:
        raise IdentError(f"--digits: {args.digits} is not between 1 and 17")
    notes = []
    if fmt in ("urdf", "mjcf"):
        if not args.urdf:
            raise IdentError(f"--urdf: {fmt.upper()} export needs the robot's URDF")
        robot, ps = robot_for_params(args, args.params, robot_path=args.urdf)
        if fmt == "urdf":
            notes = export_urdf(args.urdf, robot, ps, args.out, friction=args.with_friction, digits=args.digits)
        else:
            export_mjcf(args.urdf, robot, ps, args.out, digits=args.digits)
        links = [g[0] for g in robot.merged]
    else:
        if args.urdf:
            ps = robot_for_params(args, args.params, robot_path=args.urdf)[1]
        else:
            ps = load_parameters(args.params)
        export_parameters(ps, args.out, fmt)
        links = list(ps.body_names)
    if args.json:
        print_json({"out": args.out, "format": fmt, "links": links, "notes": notes})
    elif not args.quiet:
        what = f"{len(links)} identified bod(ies)" if fmt in ("urdf", "mjcf") else f"{len(links)} link(s)"
        print(f"wrote {args.out} ({fmt}): {what}")
        for note in notes:
            print(f"note: {note}")
    return 0
