"""``ident fit ROBOT LOG... --out params.yaml``: identify base parameters and a full model from logs."""

from __future__ import annotations

import argparse
import sys
import warnings

import numpy as np

from ..arm.parameters import make_context
from ..errors import IdentError
from ..estimation.estimate import REGULARIZATION, fit
from ..estimation.result import METHODS, Bounds
from ..handover.paramfile import load_parameters, save_parameters
from ..progress import Progress
from .common import add_robot_arguments, add_terms_argument, print_json, robot_from_args, terms_from_args
from .logs import add_log_arguments, dataset_from_args

EXAMPLE = """\
examples:
  ident fit arm.urdf run1.csv run2.csv --out identified.yaml
  ident fit arm.urdf run.csv --method wls --terms fv,fc --cutoff 8 --out identified.yaml
  ident fit arm.urdf run.bag --profile arm_profile.yaml --method consistent --out identified.yaml
  ident fit arm.urdf run.csv --method consistent --mass link6=0.5:2.0 \\
      --com link6=-0.05,-0.05,0:0.05,0.05,0.12 --total-mass 18.2 --out identified.yaml

Methods: ols (least squares), wls (each joint weighted by its noise level from the OLS residuals),
consistent (physically realizable links: pseudo-inertias positive semidefinite, friction and
armature >= 0; the description's inertial values decide only what the data cannot see).
The table lists each base parameter with its standard deviation (by default a jackknife over contiguous
time blocks, see --uncertainty); 'poor' flags a relative standard
deviation above 10 %. The parameter file holds per-link mass, COM and inertia at the COM, per-joint
terms, the base parameters with their regroupings, the method, the data and the diagnostics.
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "fit",
        help="identify inertial, friction and armature parameters from logs",
        description="Fit the robot's dynamic parameters to logged joint data (least squares, weighted least "
        "squares or a physically consistent fit) and write a parameter file.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    p.add_argument("logs", nargs="+", metavar="LOG", help="log files (CSV, Parquet, ROS bags)")
    p.add_argument("--out", required=True, metavar="PARAMS", help="parameter file to write (YAML)")
    p.add_argument("--method", choices=METHODS, default="consistent", help="estimator: ols, wls, or consistent (physically consistent links; the default)")
    add_terms_argument(p, default="auto", auto=True)
    add_log_arguments(p)
    g = p.add_argument_group("consistent fit")
    g.add_argument("--prior", metavar="PARAMS", help="parameter file whose inertial values act as the prior (default: the description's)")
    g.add_argument("--regularization", type=float, default=REGULARIZATION, metavar="W",
                   help=f"weight of the log-det pull toward the prior when the data fit and physics conflict (default {REGULARIZATION:g})")
    g.add_argument("--mass", action="append", default=[], metavar="LINK=MIN:MAX", help="mass range of a link, kg (repeatable)")
    g.add_argument("--com", action="append", default=[], metavar="LINK=X0,Y0,Z0:X1,Y1,Z1", help="box holding a link's COM, m in the link frame (repeatable)")
    g.add_argument("--total-mass", type=float, metavar="KG", help="known total mass of the identified links")
    g.add_argument("--solver", default="CLARABEL", metavar="NAME", help="cvxpy solver (default CLARABEL)")
    p.add_argument("--uncertainty", choices=("blocks", "classic"), default="blocks",
                   help="standard deviations: blocks (jackknife over contiguous time blocks, counts correlated residuals "
                   "and model error; the default) or classic (s^2 (W^T W)^-1, assumes white residuals)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print the base parameters and diagnostics as JSON")
    p.set_defaults(func=run)


def _floats(text: str, count: int, option: str) -> np.ndarray:
    try:
        vals = np.array([float(v) for v in text.split(",")])
    except ValueError:
        raise IdentError(f"{option}: '{text}' is not {count} numbers") from None
    if vals.size != count or not np.all(np.isfinite(vals)):
        raise IdentError(f"{option}: '{text}' is not {count} finite numbers")
    return vals


def bounds_from_args(args) -> Bounds:
    """The --mass, --com and --total-mass options as :class:`ident.estimation.result.Bounds`."""
    b = Bounds(total_mass=args.total_mass)
    for item in args.mass:
        link, sep, rng = item.partition("=")
        lo, sep2, hi = rng.partition(":")
        if not sep or not sep2 or not link:
            raise IdentError(f"--mass: expected LINK=MIN:MAX, got '{item}'")
        b.mass[link] = tuple(_floats(f"{lo},{hi}", 2, f"--mass {link}"))
    for item in args.com:
        link, sep, box = item.partition("=")
        lo, sep2, hi = box.partition(":")
        if not sep or not sep2 or not link:
            raise IdentError(f"--com: expected LINK=X0,Y0,Z0:X1,Y1,Z1, got '{item}'")
        b.com[link] = (_floats(lo, 3, f"--com {link}"), _floats(hi, 3, f"--com {link}"))
    return b


def run(args) -> int:
    robot = robot_from_args(args)
    terms = terms_from_args(args)
    bounds = bounds_from_args(args)
    if not bounds.empty() and args.method != "consistent":
        raise IdentError("--mass, --com and --total-mass need --method consistent")
    prior = load_parameters(args.prior, robot) if args.prior else None
    data = dataset_from_args(args, robot)
    show = not (args.quiet or args.json)
    with warnings.catch_warnings(record=True) as caught, Progress(data.n_samples, "fit", enabled=show) as bar:
        # The fit records its own warnings in the result (printed with the summary, kept in the
        # file); Python's two-line warning format with a source path is no use on a command line.
        warnings.simplefilter("always")
        res = fit(robot, data, args.method, terms, bounds=bounds, prior=prior, regularization=args.regularization,
                  solver=args.solver, progress=lambda done, total: bar.update(done), uncertainty=args.uncertainty)
    known = {" ".join(w.split()) for w in res.warnings}
    for w in caught:
        msg = " ".join(str(w.message).split())
        if msg not in known and not args.quiet:
            sys.stderr.write(f"ident fit: warning: {msg}\n")
    ps = res.to_parameter_set(data={"files": [str(f) for f in args.logs], "warnings": list(data.warnings)})
    ps.context = make_context(robot, {**data.info.get("options", {}), "cutoff": data.info.get("cutoff")})
    save_parameters(args.out, ps)
    if args.json:
        out = ps.to_dict()
        print_json({"out": args.out, "base_parameters": out.get("base_parameters", []), "diagnostics": out.get("diagnostics", {}),
                    "data_warnings": list(data.warnings)})
    elif not args.quiet:
        print(res.summary())
        print(conditioning_line(data))
        for w in data.warnings:
            print(f"warning: {w}")
        print(f"wrote {args.out}")
    return 0


def conditioning_line(data) -> str:
    """One line on how the logs were conditioned and how many joint samples each rule left out."""
    info = data.info
    counts = info.get("counts", {})
    rule = (info.get("cutoff_rule") or {}).get("rule", "given")
    cut = info.get("cutoff")
    return (f"conditioning: low-pass {cut:.4g} Hz ({rule}); left out {counts.get('slow', 0)} joint samples in the slow zone "
            f"(dry-friction rows only), {counts.get('stuck', 0)} stuck, {counts.get('trimmed', 0)} trimmed at segment ends, "
            f"{counts.get('clipped', 0)} clipped" if cut else "conditioning: no low-pass filter")

