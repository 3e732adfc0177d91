"""``ident payload ROBOT PARAMS LOG... --out payload.yaml``: identify a load on the last link."""

from __future__ import annotations

import argparse

from ..data.load import load_dataset
from ..estimation.payload import identify_payload, save_payload
from ..progress import Progress
from .common import add_robot_arguments, conditioning_for_params, print_json, robot_for_params
from .logs import add_log_arguments, options_from_args

EXAMPLE = """\
examples:
  ident payload arm.urdf identified.yaml gripper_run.csv --out gripper.yaml
  ident payload arm.urdf identified.yaml run.csv --frame tool0 --cutoff 8 --out payload.yaml

The arm's own parameters come from PARAMS (from 'ident fit'); only the payload rigidly fixed to the
last link (or --body) is identified: mass, centre of mass and inertia at the centre of mass,
physically consistent by construction. The unconstrained mass and its standard deviation are printed
too: a log without payload should give a mass within about three standard deviations of zero.
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "payload",
        help="identify a payload on the last link of an identified arm",
        description="Identify the mass, centre of mass and inertia of a payload rigidly attached to the last "
        "link, from a short log and the arm's identified parameters.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    p.add_argument("params", metavar="PARAMS", help="the arm's parameter file (YAML)")
    p.add_argument("logs", nargs="+", metavar="LOG", help="log files recorded with the payload attached")
    p.add_argument("--out", required=True, metavar="FILE", help="payload file to write (YAML)")
    p.add_argument("--body", metavar="LINK", help="body carrying the payload (default: the last one)")
    p.add_argument("--frame", metavar="FRAME", help="express the result in this link frame of that body, e.g. a flange (default: the body frame)")
    add_log_arguments(p)
    p.add_argument("--solver", default="CLARABEL", metavar="NAME", help="cvxpy solver (default CLARABEL)")
    p.add_argument("--uncertainty", choices=("blocks", "classic"), default="blocks",
                   help="standard deviations: blocks (jackknife over contiguous time blocks, counts correlated residuals "
                   "and model error; the default) or classic (s^2 (W^T W)^-1, assumes white residuals)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print the result as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    robot, ps = robot_for_params(args, args.params)
    opts = conditioning_for_params(ps, options_from_args(args), args.params)
    data = load_dataset(args.logs, robot=robot, profile=args.profile, options=opts)
    show = not (args.quiet or args.json)
    with Progress(data.n_samples, "payload", enabled=show) as bar:
        res = identify_payload(robot, ps, data, body=args.body, frame=args.frame, solver=args.solver,
                               progress=lambda done, total: bar.update(done), uncertainty=args.uncertainty)
    res.sources = [str(f) for f in args.logs]
    save_payload(args.out, res)
    if args.json:
        print_json({"out": args.out, **res.to_dict()})
    elif not args.quiet:
        print(res.summary())
        for w in data.warnings:
            print(f"warning: {w}")
        print(f"wrote {args.out}")
    return 0
