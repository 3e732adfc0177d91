"""The friction curve a data set shows, against the fitted friction laws.

Per joint, the measured friction is the torque the rigid bodies and the armature leave unexplained,
``tau - (M(q) q'' + c + g)(identified inertials) - ia q''``, binned against the velocity: bins
symmetric about zero, geometrically spaced so the low-speed range (where the friction laws
differ) gets as many bins as the fast one. Each bin reports the mean and the standard deviation
of the samples in it. The fitted laws are evaluated on a fine velocity grid with
:func:`ident.arm.dynamics.friction_law`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..arm.dynamics import friction_law, inverse_dynamics
from ..arm.model import Robot
from ..arm.parameters import ParameterSet
from ..errors import DataError

#: Bins per velocity sign.
BINS = 24


@dataclass
class FrictionCurve:
    """One joint's measured friction against velocity and the fitted laws.

    centers (k,) bin velocities (rad/s or m/s); mean, spread (k,) friction (N m or N) in each bin;
    counts (k,) samples; grid (g,) velocities of the laws; laws {label: (g,)} friction.
    """

    joint: str
    centers: np.ndarray
    mean: np.ndarray
    spread: np.ndarray
    counts: np.ndarray
    grid: np.ndarray
    laws: dict


def friction_curves(robot: Robot, ps: ParameterSet, data, others: dict | None = None, bins: int = BINS) -> list[FrictionCurve]:
    """Measured friction of a conditioned data set (``q, dq, ddq, tau`` stacked, (N, n)) per joint.

    `ps` provides the rigid-body and armature model that is subtracted and the fitted law;
    `others` ({label: ParameterSet}) adds more laws to compare (e.g. the description's or
    another fit's). Stuck samples (``data.stuck``) are left out: their friction is undetermined.
    """
    ps = ps.check_robot(robot)
    q, dq, ddq, tau = data.q, data.dq, data.ddq, data.tau
    if q is None or dq is None or ddq is None or q.shape[0] < 2:
        raise DataError("friction curve: needs conditioned samples (load the logs with load_dataset)")
    rigid = inverse_dynamics(robot, q, dq, ddq, ps.inertial, {"ia": ps.joint_params["ia"]} if "ia" in ps.joint_params else None)
    meas = tau - rigid
    stuck = getattr(data, "stuck", None)
    laws_ps = {"fitted": ps} | dict(others or {})
    out = []
    for j, name in enumerate(robot.joint_names):
        v = dq[:, j]
        use = np.ones(v.size, dtype=bool) if stuck is None else ~stuck[:, j]
        vmax = float(np.max(np.abs(v[use]))) if use.any() else 0.0
        if vmax <= 0:
            continue
        vmin = max(vmax * 1e-3, 1e-5)
        edges_pos = np.concatenate([[0.0], np.geomspace(vmin, vmax * (1 + 1e-9), bins)])
        edges = np.concatenate([-edges_pos[:0:-1], edges_pos])
        idx = np.digitize(v[use], edges) - 1
        k = edges.size - 1
        counts = np.bincount(idx, minlength=k)[:k]
        sums = np.bincount(idx, meas[use, j], minlength=k)[:k]
        sq = np.bincount(idx, meas[use, j] ** 2, minlength=k)[:k]
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = sums / counts
            spread = np.sqrt(np.maximum(sq / counts - mean**2, 0.0))
        centers = 0.5 * (edges[:-1] + edges[1:])
        keep = counts > 0
        grid = np.concatenate([-np.geomspace(vmax, vmin, 200), np.geomspace(vmin, vmax, 200)])
        laws = {}
        for label, other in laws_ps.items():
            jp = {c: np.asarray(v_)[j : j + 1] for c, v_ in other.check_robot(robot).joint_params.items()}
            laws[label] = friction_law(jp, grid)[:, 0]
        out.append(FrictionCurve(name, centers[keep], mean[keep], spread[keep], counts[keep], grid, laws))
    return out


def friction_figure(curves: list[FrictionCurve], unit: str = "N m"):
    """A matplotlib figure: per joint, the binned measured friction (mean and +-1 std band) against
    velocity on a symmetric log axis, and every fitted law."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    k = max(len(curves), 1)
    cols = min(3, k)
    rows = (k + cols - 1) // cols
    fig, axes = plt.subplots(rows, cols, figsize=(4.2 * cols, 3.0 * rows), squeeze=False)
    for ax, c in zip(axes.flat, curves):
        ax.fill_between(c.centers, c.mean - c.spread, c.mean + c.spread, color="0.85", label="measured +-1 std")
        ax.plot(c.centers, c.mean, "k.", ms=4, label="measured (bin mean)")
        for label, law in c.laws.items():
            ax.plot(c.grid, law, lw=1.4, label=label)
        lin = float(np.min(np.abs(c.grid))) * 10
        ax.set_xscale("symlog", linthresh=max(lin, 1e-4))
        ax.set_title(c.joint, fontsize=10)
        ax.set_xlabel("velocity (rad/s or m/s)", fontsize=9)
        ax.set_ylabel(f"friction ({unit})", fontsize=9)
        ax.tick_params(labelsize=8)
        ax.grid(alpha=0.3)
    for ax in list(axes.flat)[len(curves):]:
        ax.axis("off")
    if curves:
        axes.flat[0].legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    return fig
