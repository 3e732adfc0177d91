"""``ident simulate ROBOT --trajectory T --truth P --out LOG``: a closed-loop simulated log for tests and demos."""

from __future__ import annotations

import argparse

import numpy as np

from ..errors import IdentError
from ..intake import count, number, seed
from ..motion.simulate import SimulationSettings, read_trajectory, simulate, write_log
from .common import add_robot_arguments, format_table, print_json, robot_for_params

EXAMPLE = """\
example:
  ident simulate arm.urdf --trajectory excite/trajectory.csv --truth as_built.yaml \\
      --out run1.csv --log-rate 200 --torque-noise 0.1 --seed 7

The arm (with the TRUE parameters of --truth: inertia, friction, armature) tracks the trajectory
with a torque controller that knows only the description's values; the log holds time, quantized
positions <joint>.q and the commanded torque plus noise <joint>.tau (default table convention).
"""


def add_parser(sub) -> None:
    p = sub.add_parser(
        "simulate",
        help="simulate the arm tracking a trajectory and write a log (test and demo data)",
        description="Simulate the arm in closed loop (torque-commanding tracking controller, plant with the true "
        "parameters incl. Coulomb and viscous friction and armature, fine fixed-step integration, encoder "
        "quantization, torque noise) and write the log as CSV. Deterministic for a seed.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_robot_arguments(p)
    p.add_argument("--trajectory", required=True, metavar="CSV", help="reference: time and <joint>.q [.dq, .ddq] at the control rate")
    p.add_argument("--truth", required=True, metavar="YAML", help="parameter file with the plant's true parameters")
    p.add_argument("--out", required=True, metavar="CSV", help="log file to write")
    p.add_argument("--seed", type=int, default=0, help="seed of the torque noise (default 0)")
    p.add_argument("--log-rate", type=float, metavar="HZ", help="log sample rate; must divide the control rate (default: the control rate)")
    p.add_argument("--torque-noise", default="0", metavar="STD[,STD...]", help="std of the logged-torque noise, N m (N): one value or one per joint (default 0)")
    p.add_argument("--encoder-counts", type=int, default=2**20, metavar="COUNTS", help="encoder counts per revolution (default 2^20)")
    p.add_argument("--bandwidth", type=float, default=SimulationSettings.bandwidth, metavar="HZ", help=f"tracking bandwidth of the PD term (default {SimulationSettings.bandwidth:g})")
    p.add_argument("--substeps", type=int, default=SimulationSettings.substeps, metavar="K", help=f"integration steps per control tick (default {SimulationSettings.substeps})")
    p.add_argument("--log-velocity", action="store_true", help="also log the plant velocity as <joint>.dq")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--json", action="store_true", help="print the run summary as JSON")
    p.set_defaults(func=run)


def _noise(text: str, n: int) -> np.ndarray:
    try:
        vals = np.array([float(v) for v in text.replace(" ", "").split(",") if v])
    except ValueError:
        raise IdentError(f"--torque-noise: '{text}' is not a list of numbers") from None
    if vals.size not in (1, n) or np.any(~np.isfinite(vals)) or np.any(vals < 0):
        raise IdentError(f"--torque-noise: expected one or {n} non-negative numbers, got '{text}'")
    return np.broadcast_to(vals, (n,)).copy()


def run(args) -> int:
    robot, truth = robot_for_params(args, args.truth)
    t, q, dq, ddq = read_trajectory(args.trajectory, robot)
    settings = SimulationSettings(
        log_rate=None if args.log_rate is None else number(args.log_rate, "--log-rate", "rate"),
        substeps=count(args.substeps, "--substeps", 1),
        torque_noise=_noise(args.torque_noise, robot.n),
        encoder_counts=count(args.encoder_counts, "--encoder-counts", 2, 2**48, limit_name="finer than any encoder (2^48 counts)"),
        bandwidth=number(args.bandwidth, "--bandwidth", "rate"),
        log_velocity=args.log_velocity,
        seed=seed(args.seed, "--seed"),
    )
    res = simulate(robot, t, q, dq, ddq, truth.inertial, truth.joint_params, settings, progress=not (args.quiet or args.json))
    write_log(args.out, res)
    summary = {
        "log": args.out,
        "samples": int(res.t.size),
        "duration_s": float(res.t[-1]),
        "log_rate_hz": float(1.0 / (res.t[1] - res.t[0])) if res.t.size > 1 else None,
        "saturated_commands": res.saturated,
        "joints": [
            {"name": j, "tracking_rms": float(res.tracking_rms[i]), "torque_noise_std": float(res.torque_noise[i]),
             "peak_torque": float(np.abs(res.tau_command[:, i]).max())}
            for i, j in enumerate(robot.joint_names)
        ],
    }
    if args.json:
        print_json(summary)
    elif not args.quiet:
        print(f"wrote {args.out}: {summary['samples']} samples, {summary['duration_s']:.2f} s at {summary['log_rate_hz']:.6g} Hz")
        rows = [[j["name"], f"{j['tracking_rms']:.3g}", f"{j['peak_torque']:.4g}", f"{j['torque_noise_std']:.3g}"] for j in summary["joints"]]
        print(format_table(["joint", "tracking RMS (rad|m)", "peak torque", "noise std"], rows, "lrrr"))
        if res.saturated:
            print(f"note: {res.saturated} command samples hit the effort limit and were saturated")
    return 0
