"""Time the base-parameter computation of a 7-joint arm with friction and armature terms.

Target: under 1 s. Uses the 7-joint arm shipped by example-robot-data (fingers locked) when the test
extra is installed; prints the figures.

    python scripts/bench_base.py
"""

from __future__ import annotations

import importlib.metadata
import time
from pathlib import Path

import numpy as np

import ident
from ident.arm import base


def main() -> None:
    root = Path(importlib.metadata.distribution("example-robot-data").locate_file("cmeel.prefix/share/example-robot-data/robots"))
    robot = ident.load_robot(root / "panda_description/urdf/panda.urdf", locked={"panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02})
    # warm the compiled regressor so the figure is the computation, not the JIT
    ident.regressor(robot, np.zeros((1, robot.n)), np.zeros((1, robot.n)), np.zeros((1, robot.n)))
    times = []
    for seed in range(5):
        base._CACHE.clear()
        t0 = time.perf_counter()
        b = base.base_parameters(robot, "all", seed=seed)
        times.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    base.base_parameters(robot, "all", seed=4)
    cached = time.perf_counter() - t0
    print(f"robot: {robot.name}, {robot.n} joints, terms fv,fc,fo,ia: {b.n_full} full -> {b.n_base} base parameters")
    print(f"base parameters: best {min(times):.3f} s, median {np.median(times):.3f} s over {len(times)} runs (target < 1 s)")
    print(f"cached lookup: {cached * 1e3:.3f} ms")


if __name__ == "__main__":
    main()
