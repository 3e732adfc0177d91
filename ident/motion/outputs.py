"""What an excitation design hands over: summaries (text and JSON), the trajectory table, the plot, and the output folder.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..arm.model import Robot
from ..errors import IdentError
from ..fileio import atomic_folder, atomic_path, write_text
from .constraints import prior_torque
from .design import ExcitationResult
from .fourier import FourierTrajectory, save_trajectory


def _num(x):
    """JSON-safe number: inf/nan become None."""
    x = float(x)
    return x if math.isfinite(x) else None


def summary_dict(result: ExcitationResult) -> dict:
    """The summary as a JSON-ready mapping (criteria, margins, peaks per joint, optimizer record)."""
    cfg, m = result.config, result.margins
    joints = []
    for j, name in enumerate(result.joint_names):
        joints.append(
            {
                "joint": name,
                "unit": result.joint_units[j] if result.joint_units else "rad",
                "home": float(cfg.home[j]),
                "range_used": [float(v) for v in _range_used(result.trajectory, j)],
                "margin_lower": _num(m.position_lower[j]),
                "margin_upper": _num(m.position_upper[j]),
                "peak_velocity": float(m.peak_velocity[j]),
                "velocity_limit": float(cfg.velocity[j]),
                "margin_velocity": _num(m.velocity[j]),
                "peak_acceleration": float(m.peak_acceleration[j]),
                "acceleration_limit": float(cfg.acceleration[j]),
                "margin_acceleration": _num(m.acceleration[j]),
                "peak_torque": float(m.peak_torque[j]),
                "torque_limit": _num(cfg.torque[j]),
                "margin_torque": _num(m.torque[j]),
            }
        )
    return {
        "robot": result.robot_name,
        "criterion_optimized": cfg.criterion,
        "criteria": {k: _num(v) for k, v in result.criteria.items()},
        "criteria_new_trajectory": {k: _num(v) for k, v in result.criteria_new.items()},
        "criteria_earlier_logs": None if result.criteria_prior is None else {**{k: _num(v) for k, v in result.criteria_prior.items()}, "rank_deficient": not math.isfinite(result.criteria_prior["cond"])},
        "base_parameters": len(result.base_names),
        "terms": list(cfg.terms),
        "period_s": cfg.period,
        "harmonics": cfg.harmonics,
        "periods": cfg.periods,
        "rate_hz": cfg.rate,
        "duration_s": cfg.period * cfg.periods,
        "joints": joints,
        "keepout": {name: {"margin_m": _num(v[0]), "closest_point": v[1], "time_s": v[2]} for name, v in m.keepout.items()},
        "notes": _notes(result),
        "checked_on": f"{cfg.design_samples * cfg.check_factor} samples a period and every controller sample, with cushions for excursions between samples",
        "optimizer": {"seed": cfg.seed, "starts": result.starts, "elapsed_s": result.elapsed, "time_budget_s": cfg.budget, "budget_hit": result.budget_hit},
    }


def _notes(result: ExcitationResult) -> list[str]:
    """Warnings a user should read before running the trajectory."""
    notes = []
    if result.criteria["cond"] > 100:
        notes.append(f"condition number {result.criteria['cond']:.3g} is high (values below about 100 are usual for a good excitation, common practice): expect poorly identified parameters; widen the limits, lengthen the period or add harmonics")
    if not np.all(np.isfinite(result.config.torque)):
        free = [j for j, v in zip(result.joint_names, result.config.torque) if not np.isfinite(v)]
        notes.append(f"no torque limit for joint(s) {', '.join(free)}: torques were not constrained there")
    if result.budget_hit:
        notes.append("the time budget stopped the optimizer: a rerun with the same seed may differ; raise the budget for a reproducible result")
    return notes


def _range_used(traj: FourierTrajectory, j: int) -> tuple[float, float]:
    t = np.linspace(0.0, traj.period, 4000, endpoint=False)
    q, _, _ = traj.evaluate(t)
    return float(q[:, j].min()), float(q[:, j].max())


def summary_text(result: ExcitationResult) -> str:
    """Plain-text summary: criteria, per-joint margins and peaks, keep-out margins."""
    from ..text import format_table

    d = summary_dict(result)
    c_cond, c_ld = _fmt_crit(result.criteria)
    lines = [
        f"Excitation for {d['robot']}: {d['harmonics']} harmonics, period {d['period_s']:g} s x {d['periods']}, sampled at {d['rate_hz']:g} Hz",
        f"Criteria on {d['base_parameters']} base parameters (joint terms: {', '.join(d['terms']) or 'none'}; optimized: {d['criterion_optimized']})"
        + (", earlier logs and new trajectory combined" if result.criteria_prior is not None else ""),
        f"  condition number (column-scaled base regressor): {c_cond}",
        f"  log det of the information matrix:               {c_ld}",
    ]
    if result.criteria_prior is not None:
        e_cond, e_ld = _fmt_crit(result.criteria_prior)
        n_cond, n_ld = _fmt_crit(result.criteria_new)
        lines += [
            f"  earlier logs alone:   cond {e_cond}, logdet {e_ld}",
            f"  new trajectory alone: cond {n_cond}, logdet {n_ld}",
        ]
    rows = []
    for j in d["joints"]:
        rows.append(
            [
                j["joint"],
                f"{j['range_used'][0]:.3f}..{j['range_used'][1]:.3f} {j['unit']}",
                f"{_fmt(j['margin_lower'])}/{_fmt(j['margin_upper'])}",
                f"{j['peak_velocity']:.3g} / {j['velocity_limit']:.3g}",
                f"{j['peak_acceleration']:.3g} / {j['acceleration_limit']:.3g}",
                f"{j['peak_torque']:.3g} / {_fmt(j['torque_limit'])}",
            ]
        )
    lines += ["", "Per joint (margins after the position margin; peak / limit):"]
    lines.append(format_table(["joint", "range used", "margin lo/hi", "velocity", "acceleration", "torque (prior model)"], rows))
    if d["keepout"]:
        lines += ["", "Keep-out regions (smallest distance beyond each region's margin):"]
        lines.append(format_table(["region", "margin (m)", "closest point", "at t (s)"], [[k, f"{v['margin_m']:.4f}", v["closest_point"], f"{v['time_s']:.3f}"] for k, v in d["keepout"].items()]))
    for note in d["notes"]:
        lines += ["", f"Note: {note}"]
    o = d["optimizer"]
    lines += ["", f"Optimizer: seed {o['seed']}, {len(o['starts'])} starts in {o['elapsed_s']:.1f} s" + (" (time budget reached: rerun with the same budget may differ)" if o["budget_hit"] else "")]
    for s in o["starts"]:
        lines.append(f"  start {s['start']}: {d['criterion_optimized']} {_fmt(s['initial'])} -> {_fmt(s['final'])} (scale {s['scale']:.3f}, {s['evaluations']} evaluations, {s['stop']})")
    lines.append(f"Checked on {d['checked_on']}.")
    return "\n".join(lines)


def _fmt(x) -> str:
    if x is None:
        return "n/a"
    return f"{x:.4g}"


def _fmt_crit(c: dict) -> tuple[str, str]:
    """Readable cond and logdet; a singular information matrix is named as such."""
    if not math.isfinite(c["cond"]):
        return "inf (rank deficient: some base parameters unidentifiable)", "-inf"
    return f"{c['cond']:.4g}", f"{c['logdet']:.5g}"


def trajectory_table(robot_joints: list[str], t, q, dq, ddq) -> str:
    """CSV text in the table convention: time, then per joint ``.q .dq .ddq`` (17 significant digits)."""
    cols = ["time"] + [f"{j}.{s}" for j in robot_joints for s in ("q", "dq", "ddq")]
    data = np.empty((t.size, 1 + 3 * len(robot_joints)))
    data[:, 0] = t
    data[:, 1::3], data[:, 2::3], data[:, 3::3] = q, dq, ddq
    body = "\n".join(",".join(repr(float(v)) for v in row) for row in data)
    return ",".join(cols) + "\n" + body + "\n"


def plot_trajectory(path, result: ExcitationResult, robot: Robot) -> None:
    """PNG: per joint, position, velocity, acceleration and prior-model torque against their limits."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    cfg = result.config
    traj = result.trajectory
    t = np.linspace(0.0, cfg.period * cfg.periods, max(2000, 400 * cfg.periods))
    q, dq, ddq = traj.evaluate(t)
    tau = prior_torque(robot, cfg, q, dq, ddq)
    n = len(result.joint_names)
    ncol = 4
    fig, axes = plt.subplots(n, ncol, figsize=(4.2 * ncol, 1.9 * n + 0.8), sharex=True, squeeze=False)
    for j, name in enumerate(result.joint_names):
        u = result.joint_units[j] if result.joint_units else "rad"
        series = [(q[:, j], f"{u}", (cfg.lower[j], cfg.upper[j]), (cfg.lower[j] + cfg.position_margin[j], cfg.upper[j] - cfg.position_margin[j])), (dq[:, j], f"{u}/s", (-cfg.velocity[j], cfg.velocity[j]), None), (ddq[:, j], f"{u}/s^2", (-cfg.acceleration[j], cfg.acceleration[j]), None)]
        series.append((tau[:, j], "N" if u == "m" else "N m", (-cfg.torque[j], cfg.torque[j]), None))
        for c, (y, unit, lim, inner) in enumerate(series):
            ax = axes[j, c]
            ax.plot(t, y, lw=1.0, color="C0", label="trajectory")
            for v in lim:
                if np.isfinite(v):
                    ax.axhline(v, color="C3", lw=0.8, ls="--", label="limit" if v == lim[0] else None)
            if inner is not None:
                for v in inner:
                    if np.isfinite(v):
                        ax.axhline(v, color="C1", lw=0.8, ls=":", label="limit - margin" if v == inner[0] else None)
            ax.set_ylabel(f"{name}\n[{unit}]" if c == 0 else f"[{unit}]", fontsize=8)
            ax.tick_params(labelsize=7)
            if j == 0:
                ax.set_title(["position", "velocity", "acceleration", "torque (prior model)"][c], fontsize=9)
            if j == 0 and c == 0:
                ax.legend(fontsize=7, loc="upper right")
    for c in range(ncol):
        axes[-1, c].set_xlabel("time [s]", fontsize=8)
    fig.suptitle(f"{result.robot_name}: excitation trajectory against its limits", fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=90, format="png")
    plt.close(fig)


def write_excitation(out_dir, result: ExcitationResult, robot: Robot) -> dict[str, Path]:
    """Write the design to `out_dir` (created if needed), each file atomically.

    Files: ``trajectory.csv`` (controller rate), ``coefficients.yaml`` (regenerates the CSV),
    ``trajectory.png``, ``summary.txt``, ``summary.json``. Returns {kind: path}.
    """
    import json

    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise IdentError(f"--out {out}: exists and is not a folder")
    cfg = result.config
    t, q, dq, ddq = result.sample()
    # everything is rendered before the first file is written, so a failure leaves no partial set
    csv_text = trajectory_table(result.joint_names, t, q, dq, ddq)
    summ = summary_dict(result)
    json_text = json.dumps(summ, indent=2) + "\n"
    txt = summary_text(result) + "\n"
    names = (("csv", "trajectory.csv"), ("coefficients", "coefficients.yaml"), ("plot", "trajectory.png"), ("summary", "summary.txt"), ("json", "summary.json"))
    # the set is written into a temporary folder and moved into place whole (atomic_folder)
    with atomic_folder(out) as tmp:
        files = {k: tmp / v for k, v in names}
        write_text(files["csv"], csv_text)
        save_trajectory(files["coefficients"], result.trajectory, {"robot": result.robot_name, "rate": cfg.rate, "periods": cfg.periods})
        plot_trajectory(files["plot"], result, robot)
        write_text(files["summary"], txt)
        write_text(files["json"], json_text)
    return {k: out / v for k, v in names}
