"""``ident check ROBOT PARAMS LOG...``: how well identified parameters predict held-out torque."""

from __future__ import annotations

import argparse

from ..data.load import load_dataset, read_logs
from ..errors import IdentError
from ..handover.check import validate_dataset
from ..handover.collision import FALSE_ALARM
from ..handover.paramfile import save_parameters
from .common import add_robot_arguments, conditioning_for_params, print_json, robot_for_params
from .logs import add_log_arguments, options_from_args

EXAMPLE = """\
examples:
  ident check arm.urdf identified.yaml heldout.csv --cutoff 10
  ident check arm.urdf identified.yaml heldout.csv --cutoff 10 --report check.html
  ident check arm.urdf identified.yaml run3.csv run4.csv --period 10 --harmonics 5 --json

Per joint: RMS of measured minus predicted torque, that RMS as a percentage of the joint's measured
torque range, R^2 and the largest error (with its time); per link: whether the identified inertial
parameters are physically consistent (pseudo-inertia positive semidefinite). Samples slower than
--slow-velocity are left out of a joint's figures when the model has Coulomb friction.

Against the noise: per joint the expected noise floor of the compared (low-passed) torque and how it
was estimated (period averaging with --period/--excitation, else differences of the raw torque),
and RMS / floor for moving, slow and stuck samples, for the parameters and for the description's own
values ('prior'). Collision-detection thresholds for --false-alarm alarms per sample, with the rate
each has on the held-out data; --out writes them into a copy of the parameter file. They are a
starting point: confirm them on the robot with its safety functions on.
The joints, locks, gravity and conditioning come from the parameter file; an option that
contradicts it is refused. Exit status 0 also when the fit is poor: read the figures (or --json).
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "check",
        help="validate identified parameters on held-out logs (torque errors, physical consistency)",
        description="Predict the torque of held-out logs with identified parameters and print per-joint RMS "
        "error, RMS relative to the torque range, R^2 and largest error, and per-link physical consistency. "
        "Optionally write a self-contained HTML report with plots.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    p.add_argument("params", metavar="PARAMS", help="parameter file (YAML) of this robot")
    p.add_argument("logs", nargs="+", metavar="LOG", help="held-out log files")
    add_log_arguments(p)
    p.add_argument("--report", metavar="HTML", help="also write a self-contained HTML report")
    p.add_argument("--false-alarm", type=float, default=FALSE_ALARM, metavar="RATE",
                   help=f"false-alarm rate per sample of the collision-detection thresholds (default {FALSE_ALARM:g})")
    p.add_argument("--out", metavar="PARAMS", help="write the parameter file with the collision thresholds added (YAML)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print the figures as JSON")
    p.set_defaults(func=run)


def run(args) -> int:
    robot, ps = robot_for_params(args, args.params)
    opts = conditioning_for_params(ps, options_from_args(args), args.params)
    data = load_dataset(args.logs, robot=robot, profile=args.profile, options=opts)
    raw = read_logs(args.logs, robot=robot, profile=args.profile, options=opts) if data.noise_var is None else None
    if not 0 < args.false_alarm < 0.5:
        raise IdentError(f"--false-alarm: {args.false_alarm:g} is not a rate between 0 and 0.5 per sample")
    val = validate_dataset(robot, ps, data, raw=raw, false_alarm=args.false_alarm)
    if args.out:
        if not val.collision:
            raise IdentError(f"--out: no collision thresholds to write ({val.notes[-1] if val.notes else 'none computed'})")
        ps.collision = dict(val.collision, logs=[str(f) for f in args.logs])
        save_parameters(args.out, ps)
    if args.report:
        from ..handover.report import write_report

        write_report(args.report, robot, ps, validation=val, validation_data=data, progress=not (args.quiet or args.json))
    if args.json:
        out = val.to_dict()
        out["warnings"] = list(data.warnings)
        if args.report:
            out["report"] = args.report
        if args.out:
            out["out"] = args.out
        print_json(out)
    elif not args.quiet:
        print(f"{robot.name}: {args.params} on {len(args.logs)} held-out log(s), {data.n_samples} samples")
        print(val.table())
        for note in val.notes:
            print(f"note: {note}")
        for w in data.warnings:
            print(f"warning: {w}")
        if not val.all_physical:
            print("warning: some links are not physically consistent; refit with --method consistent before using the model")
        if args.report:
            print(f"report: {args.report}")
        if args.out:
            print(f"wrote {args.out} (the parameter file with the collision thresholds)")
    return 0
