"""``ident logs``: show what a set of logs holds before fitting; and the log-loading options
shared by every command that reads logs (``add_log_arguments`` / ``dataset_from_args``)."""

from __future__ import annotations

import argparse

from ..arm.model import parse_terms
from ..data.conditioning import CUTOFF_RATIO
from ..data.dataset import Dataset
from ..data.delay import apply_delay
from ..data.load import load_dataset
from ..data.options import excitation_options
from ..data.profile import load_profile
from ..data.samples import describe, write_samples
from ..errors import IdentError
from ..estimation.delay import preliminary_delay
from .common import add_robot_arguments, format_table, print_json, robot_from_args

EPILOG = """\
examples:
  ident logs run1.csv run2.parquet
  ident logs arm.bag --profile arm_profile.yaml --robot arm.urdf --cutoff 8 --decimate 10
  ident logs run.csv --period 10 --harmonics 5 --json

Without a profile, tables need a column 'time' (s) and per joint '<joint>.q' (rad or m),
'<joint>.tau' (N m or N) and optionally '<joint>.dq', '<joint>.ddq'. Bags need
sensor_msgs/JointState messages. See datasets_demo/examples/profile.yaml for other layouts.
"""


def add_log_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the log-loading options (--profile and the conditioning settings) to `parser`.

    Read them back with :func:`options_from_args` / :func:`dataset_from_args`. Every option maps to
    a :class:`ident.data.options.LogOptions` field; unset options leave the profile's value.
    """
    g = parser.add_argument_group("log loading and conditioning")
    g.add_argument("--profile", metavar="YAML", help="log profile: columns/topics, units, signs, offsets, windows (default: the column convention)")
    g.add_argument("--cutoff", type=float, metavar="HZ",
                   help=f"zero-phase low-pass cutoff for positions and torques (default {CUTOFF_RATIO:g}x the highest excited frequency; 0 = no filter)")
    g.add_argument("--max-frequency", type=float, metavar="HZ", help="highest frequency of the excitation (sets the default cutoff)")
    g.add_argument("--excitation", metavar="YAML",
                   help="excitation file from 'ident excite' (coefficients.yaml or its config): gives --period and --harmonics")
    g.add_argument("--period", type=float, metavar="S", help="excitation period: the torque noise variance from the spread between periods")
    g.add_argument("--harmonics", type=int, metavar="K", help="harmonics of the excitation (highest frequency = K / period)")
    g.add_argument("--average", action="store_true", help="with --period: also replace the samples by their average over whole periods (exactly repeated motion only)")
    g.add_argument("--no-average", action="store_true", help="with --period: keep every period's samples (the default)")
    g.add_argument("--derivative", choices=("central", "savgol"), help="differentiation of the filtered positions (default central)")
    g.add_argument("--savgol-window", type=int, metavar="N", help="Savitzky-Golay window, odd samples (default about half a cutoff period)")
    g.add_argument("--logged-velocity", action="store_true", help="use the logged velocities instead of differentiating positions")
    g.add_argument("--logged-acceleration", action="store_true", help="use the logged accelerations")
    g.add_argument("--decimate", type=int, metavar="K", help="keep every K-th sample after filtering (default 1)")
    g.add_argument("--window", action="append", metavar="T0:T1", help="use only this time window, s from each file's start (repeatable)")
    g.add_argument("--max-gap", type=float, metavar="STEPS", help="split segments at steps longer than this many sample steps (default 5)")
    g.add_argument("--trim", type=float, metavar="S", help="drop this many seconds at both ends of each segment (default two cutoff periods)")
    g.add_argument("--delay", metavar="S[,S...]", help="torque-channel delay to remove, s (one value, or one per joint)")
    g.add_argument("--slow-velocity", type=float, metavar="V", help="flag samples with |dq| below V (rad/s or m/s) as slow for the Coulomb term (default 0.01)")
    g.add_argument("--reversal-margin", type=float, metavar="S",
                   help="also flag samples within S seconds of a velocity reversal as slow (the low-pass smears the Coulomb step; default a quarter cutoff period)")
    g.add_argument("--keep-clipped", action="store_true", help="keep samples whose torque sits at the effort limit (default: drop them)")


def options_from_args(args: argparse.Namespace) -> dict:
    """The conditioning settings given on the command line, as a dict for ``load_dataset(options=...)``."""
    opts = {
        "cutoff": args.cutoff,
        "max_frequency": args.max_frequency,
        "period": args.period,
        "harmonics": args.harmonics,
        "derivative": args.derivative,
        "savgol_window": args.savgol_window,
        "decimate": args.decimate,
        "max_gap": args.max_gap,
        "trim": args.trim,
        "slow_velocity": args.slow_velocity,
        "reversal_margin": args.reversal_margin,
    }
    opts = {k: v for k, v in opts.items() if v is not None}
    if getattr(args, "excitation", None):
        for key, val in excitation_options(args.excitation).items():
            opts.setdefault(key, val)  # explicit --period/--harmonics win
    if args.average and args.no_average:
        raise IdentError("--average and --no-average contradict each other: give one")
    if args.average:
        opts["average"] = True
    if args.no_average:
        opts["average"] = False
    if args.logged_velocity:
        opts["logged_velocity"] = True
    if args.logged_acceleration:
        opts["logged_acceleration"] = True
    if args.keep_clipped:
        opts["drop_clipped"] = False
    if args.window:
        wins = []
        for w in args.window:
            a, sep, b = w.partition(":")
            try:
                wins.append([float(a), float(b)])
            except ValueError:
                raise IdentError(f"--window: expected T0:T1 in seconds, got '{w}'") from None
            if not sep:
                raise IdentError(f"--window: expected T0:T1 in seconds, got '{w}'")
        opts["windows"] = wins
    if args.delay:
        try:
            vals = [float(v) for v in args.delay.split(",") if v.strip()]
        except ValueError:
            raise IdentError(f"--delay: expected seconds (one value or one per joint), got '{args.delay}'") from None
        opts["delay"] = vals[0] if len(vals) == 1 else vals
    return {k: v for k, v in opts.items() if v is not None}


def dataset_from_args(args: argparse.Namespace, robot=None) -> Dataset:
    """Load and condition the logs named by ``args.logs`` with the options of :func:`add_log_arguments`."""
    return load_dataset(args.logs, robot=robot, profile=args.profile, options=options_from_args(args))


def add_parser(sub) -> None:
    p = sub.add_parser(
        "logs",
        help="show what logs hold (joints, duration, rate, segments, dropped samples, warnings)",
        description="Read logs (CSV, Parquet, ROS 1/2 bags), validate them and show what would be used for "
        "identification: joints, duration, sample rate, segments, dropped samples and warnings.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("logs", nargs="+", metavar="LOG", help="log files (.csv, .parquet, .bag, .db3, .mcap or a ROS 2 bag folder)")
    p.add_argument("--robot", metavar="ROBOT", help="robot description: joints in its order, units checked against its joint types and limits")
    add_robot_arguments(p, positional=False)
    add_log_arguments(p)
    p.add_argument("--estimate-delay", action="store_true",
                   help="with --robot: estimate the torque channel's delay behind the positions from a preliminary OLS fit and report it")
    p.add_argument("--remove-delay", action="store_true", help="like --estimate-delay, and remove the delay from the samples (see --out)")
    p.add_argument("--delay-terms", default="fv,fc,ia", metavar="T1,T2", help="joint terms of the preliminary fit (default fv,fc,ia: without ia a delay stands in for rotor inertia)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.add_argument("--out", metavar="FILE", help="also write the conditioned samples (.csv or .parquet, columns segment, time, <joint>.q/.dq/.ddq/.tau)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    robot = robot_from_args(args) if args.robot else None
    opts = options_from_args(args)
    prof = load_profile(args.profile)
    ds = load_dataset(args.logs, robot=robot, profile=prof, options=opts)
    delay = None
    if args.estimate_delay or args.remove_delay:
        if robot is None:
            raise IdentError("--estimate-delay: needs --robot (the preliminary fit needs the model)")
        delay = preliminary_delay(ds, robot, parse_terms(args.delay_terms))
        if args.remove_delay:
            ds = apply_delay(ds, delay)
    summary = describe(ds)
    if delay is not None:
        summary["delay"] = {j: float(d) for j, d in zip(ds.joint_names, delay)}
        summary["delay_removed"] = bool(args.remove_delay)
    if args.out:
        write_samples(args.out, ds)
    if args.json:
        print_json(summary)
        return 0
    print(_text(ds, summary, robot))
    return 0


def _text(ds: Dataset, s: dict, robot) -> str:
    lines = []
    lines.append(f"joints ({len(s['joints'])}): {', '.join(s['joints'])}" + (f"  [model {robot.name}]" if robot is not None else ""))
    rows = []
    for f in s["files"]:
        rows.append([f["path"], f["samples"], f"{f['duration']:.3f}", f"{f['rate']:.6g}", f["segments"], ",".join(f["logged"])])
    lines.append("")
    lines.append(format_table(["file", "samples", "duration s", "rate Hz", "segments", "channels"], rows, "lrrrrl"))
    lines.append("")
    c = s["cutoff"]
    rule = (s.get("cutoff_rule") or {}).get("rule", "given")
    lines.append(f"conditioned: low-pass {c:.4g} Hz (zero phase; {rule}), {ds.info['options']['derivative']} differences, "
                 f"decimate {ds.info['options']['decimate']}; dry-friction columns filtered like the torque" if c else "conditioned: no low-pass filter")
    if s.get("slow_velocity"):
        lines.append("slow zone |q'| below (rad/s or m/s): " + ", ".join(f"{j} {v:.3g}" for j, v in zip(s["joints"], s["slow_velocity"])))
    seg_rows = [[k + 1, g["source"], f"{g['start']:.4f}", f"{g['end']:.4f}", g["samples"], f"{g['rate']:.6g}" if g["rate"] else "-"]
                for k, g in enumerate(s["segments"])]
    lines.append(f"segments: {len(seg_rows)}, samples used: {s['samples']}")
    if seg_rows:
        shown = seg_rows if len(seg_rows) <= 20 else seg_rows[:10] + [["...", "", "", "", "", ""]] + seg_rows[-5:]
        lines.append(format_table(["#", "source", "start s", "end s", "samples", "rate Hz"], shown, "rlrrrr"))
    rg = s["ranges"]
    if rg:
        chans = [c for c in ("q", "dq", "ddq", "tau") if c in rg]
        rows = [[j] + [f"{rg[c][j][0]:.4g} .. {rg[c][j][1]:.4g}" for c in chans] for j in s["joints"]]
        units = {"q": "q rad|m", "dq": "dq rad/s|m/s", "ddq": "ddq rad/s^2|m/s^2", "tau": "tau N m|N"}
        lines.append("ranges of the samples used (SI):")
        lines.append(format_table(["joint"] + [units[c] for c in chans], rows, "l" + "r" * len(chans)))
    dropped = {k: v for k, v in s["dropped"].items() if v}
    labels = dict(outside_windows="outside time windows", short="in too-short pieces", trimmed="trimmed at segment ends (filter edges)",
                  clipped="clipped torque (and neighbours)", delay_edges="lost to the delay shift", decimated="removed by decimation",
                  partial_period="in incomplete periods", averaged_out="merged by period averaging",
                  slow="joint samples in the slow zone (left out of dry-friction rows)", stuck="joint samples stuck (left out of their joint's equations)")
    lines.append("samples not used: " + ("none" if not dropped else "; ".join(f"{v} {labels.get(k, k)}" for k, v in dropped.items())))
    if s["noise_var"] is not None:
        sd = ", ".join(f"{j} {v ** 0.5:.3g}" for j, v in zip(s["joints"], s["noise_var"]))
        lines.append(f"torque noise std per sample (from the spread between {ds.info.get('periods_averaged')} periods): {sd}")
    if "delay" in s:
        dl = ", ".join(f"{j} {1e3 * d:+.2f}" for j, d in s["delay"].items())
        lines.append(f"torque delay behind positions, ms (preliminary OLS fit): {dl}" + ("  [removed]" if s["delay_removed"] else ""))
    if s["warnings"]:
        lines.append(f"warnings ({len(s['warnings'])}):")
        lines += [f"  - {w}" for w in s["warnings"]]
    else:
        lines.append("warnings: none")
    return "\n".join(lines)
