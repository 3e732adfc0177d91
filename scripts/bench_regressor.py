"""Regressor throughput and streaming memory, against pin's own regressor as a yardstick.

Prints, for the 7-joint arm of example-robot-data (panda, fingers locked):

* microseconds per sample of ``ident.arm.regressor.iter_regressor`` at N = 100 000 (best of a few runs,
  after a warm-up so numba compilation is not timed), on one thread, on all of numba's threads,
  and with the automatic rule of ``ident.arm.kernels.use_threads`` (threads only when cores are idle);
* microseconds per sample of ``pin.computeJointTorqueRegressor`` called once per sample from
  Python on the same states (the yardstick), and the ratio of the two, with a one-thread headline
  line. The yardstick includes Python's per-call overhead: pin's regressor in a compiled C++ loop
  is about twice as fast as the same calls from Python (measured separately on this machine class,
  1.6 us against 3.1 us), so ours against compiled pin is about half the printed ratio;
* peak resident memory of a child process that streams the regressor of N = 1 000 000 samples
  (consuming each chunk by the Gram-matrix update estimation does), next to the memory of the
  states themselves.

Usage: ``python scripts/bench_regressor.py [--samples 100000] [--repeat 3] [--memory-samples 1000000]``.
The machine may be shared: the script reports the best of ``--repeat`` runs and the CPU count.
"""

from __future__ import annotations

import argparse
import importlib.metadata
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

PANDA = "panda_description/urdf/panda.urdf"
LOCKED = {"panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02}


def panda_path() -> Path:
    dist = importlib.metadata.distribution("example-robot-data")
    return Path(dist.locate_file("cmeel.prefix/share/example-robot-data/robots")) / PANDA


def states(robot, N: int, seed: int = 0):
    """Random states (N, n) within the joint limits; velocities and accelerations of a few rad/s(^2)."""
    rng = np.random.default_rng(seed)
    lo = np.where(np.isfinite(robot.lower), robot.lower, -np.pi)
    hi = np.where(np.isfinite(robot.upper), robot.upper, np.pi)
    q = rng.uniform(lo, hi, (N, robot.n))
    dq = rng.uniform(-2.0, 2.0, (N, robot.n))
    ddq = rng.uniform(-5.0, 5.0, (N, robot.n))
    return q, dq, ddq


def ident_runner(robot, q, dq, ddq, mode: str):
    """A callable that streams the regressor of the whole log once with threading `mode`."""
    from ident.arm import kernels
    from ident.arm.regressor import iter_regressor

    def run():
        previous = kernels.set_threading(mode)
        try:
            checksum = 0.0
            for _, Y in iter_regressor(robot, q, dq, ddq):
                checksum += Y[-1, -1, -1]  # touch the chunk so nothing is optimised away
        finally:
            kernels.set_threading(previous)
        return checksum

    return run


def pin_runner(q, dq, ddq):
    """A callable that runs pin.computeJointTorqueRegressor once per sample from Python."""
    import pinocchio as pin

    model = pin.buildModelFromUrdf(str(panda_path()))
    ids = [model.getJointId(j) for j in LOCKED]
    q_ref = pin.neutral(model)
    for name, val in LOCKED.items():
        q_ref[model.joints[model.getJointId(name)].idx_q] = val
    model = pin.buildReducedModel(model, ids, q_ref)
    data = model.createData()

    def run():
        for s in range(q.shape[0]):
            pin.computeJointTorqueRegressor(model, data, q[s], dq[s], ddq[s])

    return run


def measure(runners: dict, samples: dict, repeat: int) -> dict:
    """Best wall and CPU time per sample (us) of each runner, rounds interleaved so that every
    runner sees the same spells of machine load."""
    best = {k: [np.inf, np.inf] for k in runners}
    for _ in range(repeat):
        for k, run in runners.items():
            w0, c0 = time.perf_counter(), time.process_time()
            run()
            w, c = time.perf_counter() - w0, time.process_time() - c0
            best[k][0] = min(best[k][0], w / samples[k] * 1e6)
            best[k][1] = min(best[k][1], c / samples[k] * 1e6)
    return best


def memory_child(N: int) -> None:
    """Run in a child process: stream the regressor of N samples and print the peak RSS (MB)."""
    import ident
    from ident.arm.regressor import iter_regressor

    robot = ident.load_robot(panda_path(), locked=LOCKED)
    q, dq, ddq = states(robot, N, seed=1)
    p = robot.n_params()
    G = np.zeros((p, p))
    for _, Y in iter_regressor(robot, q, dq, ddq):
        Yf = Y.reshape(-1, p)
        G += Yf.T @ Yf
    # VmHWM of this address space: ru_maxrss would carry over the parent's peak across fork and exec
    peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # kB on Linux (fallback)
    try:
        with open("/proc/self/status") as fh:
            peak_kb = next(float(line.split()[1]) for line in fh if line.startswith("VmHWM:"))
    except (OSError, StopIteration):
        pass
    print(f"{peak_kb / 1024:.1f} {3 * q.nbytes / 1e6:.1f} {np.trace(G):.6e}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--samples", type=int, default=100_000, help="samples for the throughput test (default 100000)")
    ap.add_argument("--pin-samples", type=int, default=20_000, help="samples for the pin loop (default 20000)")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs; the best is reported (default 3)")
    ap.add_argument("--memory-samples", type=int, default=1_000_000, help="samples for the memory test (default 1000000; 0 skips)")
    ap.add_argument("--memory-child", type=int, default=0, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.memory_child:
        memory_child(args.memory_child)
        return 0

    import numba

    import ident

    robot = ident.load_robot(panda_path(), locked=LOCKED)
    q, dq, ddq = states(robot, args.samples)
    print(f"robot: {robot.describe()}; regressor {robot.n} x {robot.n_params()} per sample")
    print(f"machine: {os.cpu_count()} CPUs, numba threads {numba.get_num_threads()}, load average {os.getloadavg()[0]:.2f}")
    from ident.arm import kernels

    print(f"threads chosen by the automatic rule for a 2048-sample chunk now: {kernels.use_threads(2048)}")
    runners, samples = {}, {}
    for mode in ("off", "on", "auto"):
        if mode == "on" and numba.get_num_threads() < 2:
            continue
        runners[f"ident {mode}"] = ident_runner(robot, q, dq, ddq, mode)
        samples[f"ident {mode}"] = q.shape[0]
    for run in runners.values():
        run()  # compile (or load from the cache) and warm up
    try:
        m = min(args.pin_samples, args.samples)
        runners["pin loop"] = pin_runner(q[:m], dq[:m], ddq[:m])
        samples["pin loop"] = m
    except ImportError:
        print("pin not installed: no reference timing")
    best = measure(runners, samples, args.repeat)
    labels = {"ident off": "ident iter_regressor, 1 thread", "ident on": f"ident iter_regressor, {numba.get_num_threads()} threads",
              "ident auto": "ident iter_regressor, automatic", "pin loop": "pin computeJointTorqueRegressor loop"}
    print(f"best of {args.repeat} interleaved rounds; wall clock and CPU time (the CPU time of a threaded run sums its threads)")
    for k, (wall, cpu) in best.items():
        print(f"  {labels[k]:<40s} N={samples[k]:>7d}: {wall:7.3f} us/sample wall, {cpu:7.3f} us/sample CPU")
    if "pin loop" in best:
        ref = best["pin loop"]
        ours = best["ident off"]
        print(f"  headline, one thread: ident {ours[0]:.3f} us/sample | yardstick pin.computeJointTorqueRegressor per sample from "
              f"Python {ref[0]:.3f} us/sample | ratio {ref[0] / ours[0]:.2f}x (the yardstick includes Python's per-call cost)")
        for k in runners:
            if k != "pin loop":
                print(f"  speed-up {labels[k]:<33s} over the pin loop: {ref[0] / best[k][0]:5.2f}x wall, {ref[1] / best[k][1]:5.2f}x CPU")
    if args.memory_samples:
        out = subprocess.run(
            [sys.executable, __file__, "--memory-child", str(args.memory_samples)],
            check=True, capture_output=True, text=True,
        ).stdout.split()
        print(f"streaming N={args.memory_samples}: peak RSS {float(out[0]):.0f} MB (of which q, dq, ddq {float(out[1]):.0f} MB)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
