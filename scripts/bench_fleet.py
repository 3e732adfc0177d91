"""Benchmark of `ident fleet`'s engine: wall time on 1 and 2 Dask workers, and its overhead per log.

A simulated fleet (ident.fleet.simulated, the invented 4-joint arm of tests/data/quad4.urdf) of
ARMS x PERIODS short logs, one log per arm and period (every log is its own fit). Measured in one
run, on the same logs and settings:

* the plain loop: the same task functions called one after the other in this process
  (ident.fleet.engine.run_serial), with one BLAS thread as each Dask worker has: the yardstick;
* a LocalCluster of 1 worker, then of 2 workers (single-threaded worker processes), each warmed
  up first on a small fleet so imports and compiled kernels are not timed.

The three are timed in interleaved rounds and the best of each is compared (`--rounds`), with the
spread printed, because a shared machine's load drifts over the minutes a round takes.

Targets: 2 workers at least 1.7x faster than 1; the engine's overhead per log (1 worker against
the plain loop) under 10 %.

    python scripts/bench_fleet.py            # 25 arms x 8 periods = 200 logs, terms fv,fc,ia
    python scripts/bench_fleet.py --auto     # the default friction-term choice (about 4x the fit work)
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
# Dask's worker processes run with one BLAS/OpenMP thread (its nanny sets these); the plain loop
# gets the same, so both run the same single-threaded per-log code.
for _var in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
    os.environ[_var] = "1"

from ident.data.options import excitation_options  # noqa: E402 (thread settings first)
from ident.fleet.catalog import group_logs, read_catalog  # noqa: E402 (thread settings first)
from ident.fleet.engine import FitSettings, dask_client, run_fleet, run_serial  # noqa: E402 (thread settings first)
from ident.fleet.simulated import FleetSpec, make_fleet  # noqa: E402 (thread settings first)

QUAD4 = ROOT / "tests" / "data" / "quad4.urdf"


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--arms", type=int, default=25)
    ap.add_argument("--periods", type=int, default=8)
    ap.add_argument("--rounds", type=int, default=3, help="interleaved timing rounds, best reported (default 3)")
    ap.add_argument("--auto", action="store_true", help="terms auto (the default of ident fleet) instead of fv,fc,ia")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        made = make_fleet(Path(tmp) / "fleet", QUAD4, FleetSpec(arms=args.arms, periods=args.periods, cycles=2, days_between=1))
        warm = make_fleet(Path(tmp) / "warm", QUAD4, FleetSpec(arms=2, periods=2, cycles=2, days_between=1, seed=9))
        print(f"simulated {args.arms * args.periods} logs in {time.perf_counter() - t0:.1f} s")
        ex = excitation_options(Path(tmp) / "fleet" / "coefficients.yaml")
        settings = FitSettings(terms="auto" if args.auto else ("fv", "fc", "ia"), log_options=lambda e: dict(ex))
        groups = group_logs(read_catalog(made["catalog"]), "day")
        warm_groups = group_logs(read_catalog(warm["catalog"]), "day")
        n = sum(len(g.entries) for g in groups)
        loops, walls = [], {1: [], 2: []}
        with contextlib.ExitStack() as stack:
            clients = {w: stack.enter_context(dask_client(None, w)) for w in (1, 2)}
            run_serial(warm_groups, settings)
            for client in clients.values():
                run_fleet(client, warm_groups, settings, progress=False, quiet=True)
            # interleaved rounds (loop, 1 worker, 2 workers, again ...): a shared machine's load
            # drifts over minutes, and the best of each is compared
            for _ in range(args.rounds):
                t0 = time.perf_counter()
                ref = run_serial(groups, settings)
                loops.append(time.perf_counter() - t0)
                for workers, client in clients.items():
                    t0 = time.perf_counter()
                    run = run_fleet(client, groups, settings, progress=False, quiet=True)
                    walls[workers].append(time.perf_counter() - t0)
                    assert len(run.fits) == len(ref.fits) == len(groups), (len(run.fits), len(ref.fits))
    loop = min(loops)
    spread = {k: max(v) / min(v) for k, v in walls.items()}
    print(f"machine: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.2f}; best of {args.rounds} interleaved rounds "
          f"(spread worst/best: loop {max(loops) / loop:.2f}, 1 worker {spread[1]:.2f}, 2 workers {spread[2]:.2f})")
    walls = {k: min(v) for k, v in walls.items()}
    terms = "auto" if args.auto else "fv,fc,ia"
    print(f"fleet of {n} logs ({len(groups)} arm-periods), quad4, terms {terms}, consistent fit, block jackknife")
    print(f"plain loop (same task functions, this process): {loop:8.2f} s  ({1e3 * loop / n:.1f} ms a log)")
    print(f"Dask, 1 worker:                                 {walls[1]:8.2f} s  ({1e3 * walls[1] / n:.1f} ms a log)")
    print(f"Dask, 2 workers:                                {walls[2]:8.2f} s  ({1e3 * walls[2] / n:.1f} ms a log)")
    print(f"speed-up 2 workers vs 1: {walls[1] / walls[2]:.2f}x (target >= 1.7x)")
    over = walls[1] / loop - 1
    print(f"engine overhead per log (1 worker vs plain loop): {1e3 * (walls[1] - loop) / n:+.1f} ms = {100 * over:+.1f} % (target < 10 %)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
