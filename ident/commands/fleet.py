"""``ident fleet CATALOG --out DIR``: fit every arm of a fleet per period on Dask and flag friction drift."""

from __future__ import annotations

import argparse
import math
import sys

from ..data.options import excitation_options
from ..errors import IdentError
from ..estimation.result import METHODS
from ..fileio import atomic_folder
from ..fleet.catalog import PERIODS, catalog_from_pattern, check_local_files, group_logs, read_catalog
from ..fleet.drift import ALARM, BASELINE_PERIODS, FLEET_ALARM, WATCH, drift_flags, flags_table, fleet_flags
from ..fleet.engine import FitSettings, dask_client, run_fleet
from ..fleet.outputs import latest_fits, results_table, write_outputs
from ..fleet.report import render_fleet_report
from ..fleet.tasks import CHUNK_ROWS, ArmRef, robot_of
from .common import add_robot_arguments, add_terms_argument, print_json, selection_from_args, terms_from_args
from .logs import add_log_arguments, options_from_args

EXAMPLE = """\
examples:
  ident fleet catalog.csv --per week --out fleet_run
  ident fleet "logs/{arm}/{date}.parquet" --description arm.urdf --per month --out fleet_run
  ident fleet catalog.parquet --scheduler tcp://host:8786 --out fleet_run --alarm 5

Catalog columns (CSV or Parquet): arm, time (date or timestamp), log (path or URL the workers can
read), description (URDF or DH file); optional profile and excitation. Relative paths are relative
to the catalog's folder. --joints, --lock and --gravity apply to every description, as for 'ident
fit' (e.g. a hand's fingers locked). Per arm and period the logs are conditioned and compressed on the
workers, merged and fitted as 'ident fit' fits them (same defaults). Outputs in --out: fleet.parquet
(arm, period, parameter, estimate, std, samples, diagnostics), params/<arm>.yaml (each arm's latest
period), flags.csv, failures.csv and report.html.
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "fleet",
        help="fit many arms per period on a Dask cluster and flag friction drift",
        description="Identify every arm of a fleet from its routine logs, per day, week or month, with the work spread "
        "over a Dask cluster (a local one by default), and flag joints whose friction drifts from their own baseline "
        "or sits far from the fleet's median.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("source", metavar="CATALOG", help="catalog table (CSV or Parquet), or a folder pattern with {arm} and {date}")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder")
    p.add_argument("--description", metavar="FILE", help="the arms' description (URDF or DH file) for a folder pattern")
    add_robot_arguments(p, positional=False)
    p.add_argument("--per", default="week", metavar="|".join(PERIODS),
                   help="fit the logs of each arm per day, week (ISO, from Monday) or month (default week); --period is the excitation's")
    p.add_argument("--method", choices=METHODS, default="consistent", help="estimator, as for 'ident fit' (default consistent)")
    add_terms_argument(p, default="auto", auto=True)
    p.add_argument("--uncertainty", choices=("blocks", "classic"), default="blocks", help="standard deviations, as for 'ident fit' (default blocks)")
    add_log_arguments(p)
    g = p.add_argument_group("cluster")
    g.add_argument("--scheduler", metavar="ADDRESS", help="run on an existing Dask cluster (e.g. tcp://host:8786); default: a local one")
    g.add_argument("--workers", type=int, metavar="N", help="worker processes of the local cluster (default: the machine's cores)")
    g.add_argument("--connect-timeout", type=float, default=10.0, metavar="S", help="seconds to wait for the scheduler (default 10)")
    g.add_argument("--split-logs", action="store_true",
                   help="compress the stretches of a period's logs in parallel and merge them (faster for few, long logs; equal to "
                   "'ident fit' up to rounding instead of bit for bit; the consistent fit then agrees to its solver's tolerance)")
    g.add_argument("--chunk-rows", type=int, default=CHUNK_ROWS, metavar="N",
                   help=f"cut a CSV or Parquet log longer than N rows into chunks of about N rows that any worker reads and "
                   f"conditions (default {CHUNK_ROWS}; 0: never cut)")
    g.add_argument("--strict", action="store_true", help="stop at the first log or period that fails (default: report it and go on)")
    d = p.add_argument_group("drift")
    d.add_argument("--alarm", type=float, default=ALARM, metavar="SIGMAS",
                   help=f"flag a joint whose friction moves more than this many combined standard deviations from its baseline (default {ALARM:g})")
    d.add_argument("--baseline-periods", type=int, default=BASELINE_PERIODS, metavar="N",
                   help=f"first periods that make each arm's baseline (default {BASELINE_PERIODS})")
    d.add_argument("--reference", metavar="PERIOD", help="a period label (e.g. 2026-W10) to use as every arm's baseline instead")
    d.add_argument("--fleet-alarm", type=float, default=FLEET_ALARM, metavar="SIGMAS",
                   help=f"flag an arm this far from the median of the other arms of its description, in their spread (default {FLEET_ALARM:g})")
    d.add_argument("--watch", default=",".join(WATCH), metavar="CODES", help=f"friction parameters watched (default {','.join(WATCH)})")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print the run summary as JSON")
    p.set_defaults(func=run)


def _entries(args):
    src = args.source
    if "{arm}" in src or "{date}" in src:
        return catalog_from_pattern(src, args.description, args.profile, args.excitation)
    if args.description:
        raise IdentError("--description: only for a folder pattern (a catalog names each arm's description)")
    return read_catalog(src)


def _check(args) -> None:
    if args.per not in PERIODS:
        raise IdentError(f"--per: '{args.per}' is not one of {', '.join(PERIODS)}")
    if args.workers is not None and args.workers < 1:
        raise IdentError(f"--workers: must be at least 1, got {args.workers}")
    if args.scheduler and args.workers is not None:
        raise IdentError("--workers: only for the local cluster (an existing cluster has its own workers)")
    for opt, v in (("--alarm", args.alarm), ("--fleet-alarm", args.fleet_alarm), ("--connect-timeout", args.connect_timeout)):
        if not (math.isfinite(v) and v > 0):
            raise IdentError(f"{opt}: must be a positive number, got {v}")
    if args.chunk_rows < 0:
        raise IdentError(f"--chunk-rows: must be 0 (never cut) or a positive number of rows, got {args.chunk_rows}")
    if args.baseline_periods < 1:
        raise IdentError(f"--baseline-periods: must be at least 1, got {args.baseline_periods}")


def run(args) -> int:
    _check(args)
    terms = terms_from_args(args)
    watch = tuple(c.strip() for c in args.watch.split(",") if c.strip())
    if not watch:
        raise IdentError("--watch: give at least one friction parameter code (e.g. fv,dry_pos)")
    base = options_from_args(args)
    entries = _entries(args)
    groups = group_logs(entries, args.per)
    if not args.scheduler:  # a local cluster sees this machine's files: refuse missing ones before any work
        check_local_files(entries)
    selection = selection_from_args(args)
    for desc in sorted({g.description for g in groups}):
        if "://" not in desc:
            robot_of(ArmRef.of(desc, **selection))  # a broken description or selection is a bad input, not a failed log
    excit = {}

    def log_options(entry):
        if entry.excitation and entry.excitation not in excit:
            excit[entry.excitation] = excitation_options(entry.excitation)
        return {**base, **excit.get(entry.excitation, {})} if entry.excitation else dict(base)

    for e in entries:
        log_options(e)  # bad excitation files fail here, on the client, before the cluster starts
    settings = FitSettings(method=args.method, terms=terms, fit_options={"uncertainty": args.uncertainty}, log_options=log_options,
                           strict=args.strict, split=args.split_logs, chunk_rows=args.chunk_rows,
                           selection=selection)
    show = not (args.quiet or args.json)
    with dask_client(args.scheduler, args.workers, args.connect_timeout) as client:
        result = run_fleet(client, groups, settings, progress=show, quiet=args.quiet)
    if not result.fits:
        why = "; ".join(f"{f.name}: {f.message}" for f in result.failures[:3])
        raise IdentError(f"{args.source}: no arm and period could be fitted ({why})")
    table = results_table(groups, result.fits)
    flags = drift_flags(table, args.alarm, args.baseline_periods, args.reference, watch) + fleet_flags(table, args.fleet_alarm, watch)
    ftab = flags_table(flags)
    info = {"period": args.per, "method": args.method, "terms": args.terms, "alarm level (sigmas)": args.alarm,
            "baseline": args.reference or f"first {args.baseline_periods} period(s)", "fleet alarm (sigmas)": args.fleet_alarm,
            "cluster": args.scheduler or f"local, {args.workers or 'all'} worker(s)", "tasks": result.tasks}
    html = render_fleet_report(table, ftab, result.failures, info, watch)
    latest = latest_fits(groups, result.fits)
    with atomic_folder(args.out) as tmp:
        write_outputs(tmp, table, latest, ftab, result.failures, html)
    if args.json:
        print_json({"out": args.out, "fitted": len(result.fits), "arms": len(latest), "tasks": result.tasks,
                    "failures": [{"name": f.name, "reason": f.message} for f in result.failures], "notes": list(result.notes),
                    "flags": ftab.to_dict("records")})
    elif not args.quiet:
        print(f"fitted {len(result.fits)} arm-periods of {len(latest)} arms in {result.tasks} tasks; {len(result.failures)} failure(s)")
        for f in flags:
            print(f"flag: {f.line()}")
        for f in result.failures:
            sys.stdout.write(f"not used: {f.name}: {f.message}\n")
        for note in result.notes:
            sys.stdout.write(f"note: {note}\n")
        print(f"wrote {args.out}")
    return 0
