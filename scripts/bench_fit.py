"""Benchmark of the fit: OLS on 1 000 000 samples of a 7-joint arm (panda, fingers locked) with
friction and armature terms, then what the consistent fit adds on the same compressed data.

Targets (issue): OLS under 20 s with peak memory under 1.5 GB; the consistent fit under 1 s on
top; the fit with the block-jackknife uncertainty within 1.5x of the same fit without the block
bookkeeping (totals only, classic formula), both timed in the same run. Each size runs in a fresh child process so its peak resident memory (ru_maxrss) is its own.
The peak includes the synthetic log itself (4 arrays of N x 7 doubles, 224 MB at N = 1e6); the
run at a tenth of the size shows how little the fit's own memory grows with N.

    /work/venv/bin/python scripts/bench_fit.py [--samples 1000000]
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time


def child(n_samples: int) -> None:
    import importlib.metadata
    from pathlib import Path

    import numpy as np

    import ident
    from ident.arm.dynamics import inverse_dynamics
    from ident.estimation.compress import compress
    from ident.estimation.estimate import fit_compressed

    root = Path(importlib.metadata.distribution("example-robot-data").locate_file("cmeel.prefix/share/example-robot-data/robots"))
    robot = ident.load_robot(root / "panda_description/urdf/panda.urdf", locked={"panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02})
    terms = ("fv", "fc", "ia")
    rng = np.random.default_rng(0)

    # A 1 kHz log of a periodic excitation: five harmonics of 0.1 Hz per joint (analytic derivatives).
    t0 = time.perf_counter()
    t = np.arange(n_samples) * 1e-3
    mid = 0.5 * (robot.lower + robot.upper)
    q = np.tile(mid, (n_samples, 1))
    dq = np.zeros_like(q)
    ddq = np.zeros_like(q)
    for j in range(robot.n):
        for h in range(1, 6):
            w = 2 * np.pi * 0.1 * h
            a, ph = 0.5 * rng.uniform(0.3, 1.0) / h, rng.uniform(0, 2 * np.pi)
            s, c = np.sin(w * t + ph), np.cos(w * t + ph)
            q[:, j] += a * s
            dq[:, j] += a * w * c
            ddq[:, j] -= a * w * w * s
    jp = {"fv": np.full(robot.n, 0.5), "fc": np.full(robot.n, 0.8), "ia": np.full(robot.n, 0.1)}
    tau = inverse_dynamics(robot, q, dq, ddq, joint_params=jp) + 0.05 * rng.standard_normal(q.shape)
    gen = time.perf_counter() - t0

    # Warm the compiled kernels, the base-parameter cache and the cvxpy import (one-off costs of a
    # process, not of a fit; reported as warmup_s).
    t0 = time.perf_counter()
    small = compress(robot, (q[:2000], dq[:2000], ddq[:2000], tau[:2000]), terms)
    fit_compressed(small, "ols")
    fit_compressed(small, "consistent")
    warm = time.perf_counter() - t0

    # Yardstick in the same run: totals only (no time blocks) and the classic covariance.
    t0 = time.perf_counter()
    bare = compress(robot, (q, dq, ddq, tau), terms, keep_blocks=False)
    fit_compressed(bare, "ols", uncertainty="classic")
    t_ols_bare = time.perf_counter() - t0
    del bare

    c0, t0 = time.process_time(), time.perf_counter()
    comp = compress(robot, (q, dq, ddq, tau), terms)
    t_compress = time.perf_counter() - t0
    ols = fit_compressed(comp, "ols")
    t_ols = time.perf_counter() - t0
    cpu_ols = time.process_time() - c0

    c0, t0 = time.process_time(), time.perf_counter()
    cons = fit_compressed(comp, "consistent")
    t_cons, cpu_cons = time.perf_counter() - t0, time.process_time() - c0
    t0 = time.perf_counter()
    fit_compressed(comp, "wls")
    t_wls = time.perf_counter() - t0

    print(json.dumps({
        "samples": n_samples,
        "base_parameters": comp.n_base,
        "generate_s": round(gen, 2),
        "warmup_s": round(warm, 2),
        "compress_s": round(t_compress, 2),
        "ols_total_s": round(t_ols, 2),
        "ols_without_blocks_s": round(t_ols_bare, 2),
        "blocks": ols.uncertainty.get("blocks"),
        "ols_cpu_s": round(cpu_ols, 2),
        "wls_on_compressed_s": round(t_wls, 3),
        "consistent_on_compressed_s": round(t_cons, 3),
        "consistent_cpu_s": round(cpu_cons, 3),
        "consistent_stage": cons.solver.get("stage"),
        "consistent_solver_s": cons.solver.get("seconds"),
        "physical_links_ols": int(ols.physical.sum()),
        "physical_links_consistent": int(cons.physical.sum()),
        "residual_rms_ols": [round(float(x), 4) for x in ols.residual_rms],
        "peak_rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, 1),
    }))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--samples", type=int, default=1_000_000)
    ap.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        child(args.child)
        return
    results = []
    for n in (args.samples // 10, args.samples):
        out = subprocess.run([sys.executable, __file__, "--child", str(n)], capture_output=True, text=True)
        if out.returncode != 0:
            sys.stderr.write(out.stderr)
            raise SystemExit(out.returncode)
        results.append(json.loads(out.stdout.strip().splitlines()[-1]))
    small, big = results
    print(f"panda (7 joints, fingers locked), terms fv,fc,ia, {big['base_parameters']} base parameters")
    for r in results:
        print(f"  N = {r['samples']:>9,d}: OLS {r['ols_total_s']:6.2f} s (compression {r['compress_s']:.2f} s, CPU {r['ols_cpu_s']:.2f} s), "
              f"consistent adds {r['consistent_on_compressed_s']:.3f} s (CPU {r['consistent_cpu_s']:.3f} s, stage {r['consistent_stage']}, SDP {r['consistent_solver_s']} s), "
              f"WLS adds {r['wls_on_compressed_s']:.3f} s, peak RSS {r['peak_rss_mb']:.0f} MB")
        print(f"    block jackknife ({r['blocks']} blocks) {r['ols_total_s']:.2f} s against {r['ols_without_blocks_s']:.2f} s without the "
              f"block bookkeeping (classic formula): ratio {r['ols_total_s'] / r['ols_without_blocks_s']:.2f}")
    data_mb = 4 * 7 * 8 * (big["samples"] - small["samples"]) / 2**20
    grow = big["peak_rss_mb"] - small["peak_rss_mb"]
    print(f"  peak RSS grows by {grow:.0f} MB from N/10 to N, of which the log arrays themselves are {data_mb:.0f} MB")
    print(f"  target OLS < 20 s: {'met' if big['ols_total_s'] < 20 else 'MISSED'}; "
          f"peak < 1.5 GB: {'met' if big['peak_rss_mb'] < 1536 else 'MISSED'}; "
          f"consistent < 1 s on top: {'met' if big['consistent_on_compressed_s'] < 1 else 'MISSED'}; "
          f"blocks within 1.5x: {'met' if big['ols_total_s'] < 1.5 * big['ols_without_blocks_s'] else 'MISSED'}")
    print(json.dumps(results))


if __name__ == "__main__":
    main()
