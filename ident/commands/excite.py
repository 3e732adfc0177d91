"""``ident excite``: design a safe, informative excitation trajectory (or re-check one)."""

from __future__ import annotations

import argparse
import sys

from ..data.load import load_dataset
from ..errors import IdentError
from ..intake import count, number, seed
from ..motion.config import MAX_STARTS, load_excitation_config
from ..motion.design import design_excitation, verify_trajectory
from ..motion.fourier import load_trajectory
from ..motion.outputs import summary_text, write_excitation
from .common import SAFETY_CAUTIONS, add_robot_arguments, robot_from_args
from .logs import add_log_arguments, options_from_args

EPILOG = """\
The config (YAML) sets the period, harmonics, home pose, controller rate, limits and margins,
keep-out regions and optimizer settings; a commented example is datasets_demo/examples/excite.yaml.

Writes to DIR: trajectory.csv (time, <joint>.q, .dq, .ddq at the controller rate),
coefficients.yaml (regenerates the CSV exactly), trajectory.png (joints against their limits),
summary.txt and summary.json (criteria, margins to every limit and keep-out region, peaks).

With --augment, the log options below (--period, --harmonics, --cutoff, ...) describe the
earlier logs; the new trajectory's period and harmonics come from the config.

examples:
  ident excite ur5_robot.urdf --config excite.yaml --out excite_run1
  ident excite ur5_robot.urdf --config excite.yaml --out run2 --augment run1_log.csv --period 10 --harmonics 5
  ident excite ur5_robot.urdf --config excite.yaml --out recheck --from excite_run1/coefficients.yaml
"""


def add_parser(sub) -> None:
    """Register ``ident excite``."""
    p = sub.add_parser(
        "excite",
        help="design an excitation trajectory (Fourier series) within limits and keep-out regions",
        description="Design a periodic Fourier excitation trajectory that starts and ends at rest at home, stays within "
        "joint, velocity, acceleration and torque limits and outside keep-out regions, and makes the base parameters "
        "(friction included) well identifiable.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    p.add_argument("--config", required=True, metavar="FILE", help="excitation config (YAML)")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (created if missing)")
    p.add_argument("--seed", type=int, help="random seed of the starts (overrides optimizer.seed)")
    p.add_argument("--starts", type=int, help="number of optimizer starts (overrides optimizer.starts)")
    p.add_argument("--budget", type=float, metavar="SECONDS", help="time budget of the optimizer, s (overrides optimizer.budget; default 15)")
    p.add_argument("--criterion", choices=("cond", "logdet"), help="criterion to optimize (overrides criterion)")
    p.add_argument("--augment", nargs="+", metavar="LOG", help="logs already recorded: design the next trajectory to improve the combined data")
    p.add_argument("--from", dest="from_coeffs", metavar="COEFFS", help="skip the design: re-check and re-write an existing coefficients file")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    # --augment logs are read like every other command's logs (profile, filtering, derivatives)
    add_log_arguments(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    robot = robot_from_args(args)
    cfg = load_excitation_config(args.config, robot)
    changes = {}
    if args.seed is not None:
        changes["seed"] = seed(args.seed, "--seed")
    if args.starts is not None:
        changes["starts"] = count(args.starts, "--starts", 1, MAX_STARTS, limit_name="hours of optimizing at the least")
    if args.budget is not None:
        if not args.budget > 0:
            raise IdentError(f"--budget: expected a positive number of seconds, got {args.budget}")
        changes["budget"] = number(args.budget, "--budget", "time")
    if args.criterion is not None:
        changes["criterion"] = args.criterion
    if changes:
        cfg = cfg.with_options(**changes)
    print(SAFETY_CAUTIONS)
    print()
    if args.from_coeffs:
        if args.augment:
            raise IdentError("--from and --augment: choose one (re-check an existing trajectory, or design a new one)")
        result = verify_trajectory(robot, cfg, load_trajectory(args.from_coeffs, robot), where=args.from_coeffs)
    else:
        logs = load_dataset(args.augment, robot=robot, profile=args.profile, options=options_from_args(args)) if args.augment else None
        result = design_excitation(robot, cfg, logs=logs, progress=not args.quiet)
    paths = write_excitation(args.out, result, robot)

    print(summary_text(result))
    print()
    for kind, path in paths.items():
        print(f"wrote {kind:12s} {path}")
    print("\nRun it at reduced speed first; see the safety notes above.")
    sys.stdout.flush()
    return 0

