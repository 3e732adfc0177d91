"""One self-contained HTML report of an identification: figures embedded as PNG (base64), no external files.

Sections: the arm and the data; what the data can identify (base parameters and regroupings); how
well the motion excites the model; identified values with uncertainties; the held-out check
(measured against predicted torque per joint, residuals); before you use the model (cautions).
"""

from __future__ import annotations

import base64
import html
import io
import json
from datetime import datetime, timezone

import numpy as np

from ..arm.base import base_parameters
from ..arm.model import DRY_FRICTION_TERMS, PRISMATIC, Robot
from ..arm.parameters import ParameterSet
from ..errors import IdentError
from ..fileio import write_text
from ..progress import Progress
from .check import Validation, link_checks
from .friction import friction_curves, friction_figure

#: Relative standard deviation (percent) above which a base parameter is flagged (common practice: 10 %).
POOR_REL_STD = 10.0
#: Most points drawn per line in the time plots (decimated for a light file).
MAX_POINTS = 2500

_CSS = """
body{font-family:system-ui,-apple-system,Segoe UI,Helvetica,Arial,sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#222}
h1{font-size:1.6em}h2{font-size:1.25em;border-bottom:1px solid #ccc;padding-bottom:.2em;margin-top:1.8em}
table{border-collapse:collapse;margin:.6em 0;font-size:.9em}th,td{border:1px solid #ddd;padding:.25em .6em}
th{background:#f3f3f3;text-align:left}td.n{text-align:right;font-variant-numeric:tabular-nums}
.bad{color:#b00020;font-weight:600}.ok{color:#1b5e20}.note{color:#555}pre{background:#f7f7f7;padding:.6em;overflow-x:auto}pre.wrap{white-space:pre-wrap;overflow-wrap:anywhere}
img{max-width:100%;height:auto;border:1px solid #eee}
"""


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _table(headers, rows, numeric=None) -> str:
    numeric = numeric or [False] * len(headers)
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in headers) + "</tr>"]
    for r in rows:
        cells = []
        for c, is_num in zip(r, numeric):
            raw = isinstance(c, tuple)  # (html, css class) for pre-rendered cells
            text, cls = (c if raw else (_e(c), "n" if is_num else ""))
            cells.append(f'<td class="{cls}">{text}</td>' if cls else f"<td>{text}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _png(fig) -> str:
    """An <img> element with the figure as an embedded PNG; closes the figure."""
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=80)
    plt.close(fig)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img alt="figure" src="data:image/png;base64,{data}">'


def _plot_time(t: np.ndarray) -> np.ndarray:
    """A monotonic time axis for stacked segments (each file restarts its clock): segments follow each other."""
    t = np.asarray(t, dtype=float).copy()
    if t.size < 2:
        return t
    d = np.diff(t)
    step = np.median(d[d > 0]) if np.any(d > 0) else 1.0
    jumps = np.flatnonzero(d <= 0)
    for k in jumps:
        t[k + 1 :] += t[k] - t[k + 1] + step
    return t


def _units(robot: Robot, j: int) -> tuple[str, str]:
    return ("N", "m") if robot.joint_type[j] == PRISMATIC else ("N m", "rad")


def _fig_validation(robot: Robot, val: Validation) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    n = len(val.joint_names)
    t = _plot_time(val.t)
    stride = max(1, t.size // MAX_POINTS)
    fig, axes = plt.subplots(n, 2, figsize=(12, 2.1 * n), squeeze=False, gridspec_kw={"width_ratios": [3, 1.2]})
    # fixed margins: automatic layout engines cost seconds on a figure of this size
    fig.subplots_adjust(left=0.08, right=0.98, top=1 - 0.25 / (2.1 * n), bottom=0.45 / (2.1 * n), hspace=0.55, wspace=0.22)
    for j, name in enumerate(val.joint_names):
        unit, _ = _units(robot, j)
        ax = axes[j, 0]
        ax.plot(t[::stride], val.measured[::stride, j], color="0.55", lw=0.9, label="measured")
        ax.plot(t[::stride], val.predicted[::stride, j], color="C0", lw=0.9, label="predicted")
        resid = np.where(val.used[:, j], val.measured[:, j] - val.predicted[:, j], np.nan)  # gaps: samples left out
        ax.set_ylabel(f"{name}\ntorque ({unit})", fontsize=9)
        ax.tick_params(labelsize=8)
        ax.grid(alpha=0.3)
        # the residual is small beside the torque: its own axis on the right, or it looks flat
        axr = ax.twinx()
        axr.plot(t[::stride], resid[::stride], color="C3", lw=0.6, label="residual (samples used, right axis)")
        axr.set_ylabel(f"residual ({unit})", fontsize=9, color="C3")
        axr.tick_params(labelsize=8, colors="C3")
        if j == 0:
            h1, l1 = ax.get_legend_handles_labels()
            h2, l2 = axr.get_legend_handles_labels()
            ax.legend(h1 + h2, l1 + l2, loc="upper right", fontsize=7, ncol=3)
        if j == n - 1:
            ax.set_xlabel("time (s, held-out logs one after another)")
        res = (val.measured - val.predicted)[val.used[:, j], j]
        ax2 = axes[j, 1]
        ax2.hist(res, bins=40, range=tuple(np.percentile(res, [0.5, 99.5])), color="C3", alpha=0.8)
        ax2.set_xlabel(f"residual ({unit}), central 99 %", fontsize=9)
        ax2.set_ylabel("samples", fontsize=9)
        ax2.tick_params(labelsize=8)
        ax2.set_title(f"RMS {val.rms[j]:.3g} {unit}, R\u00b2 {val.r2[j]:.3f}", fontsize=8)
        ax2.grid(alpha=0.3)
    return _png(fig)


def _fig_coverage(robot: Robot, q: np.ndarray, dq: np.ndarray) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    n = robot.n
    height = 0.45 * n + 1.6
    fig, axes = plt.subplots(1, 2, figsize=(12, height))
    fig.subplots_adjust(left=0.12, right=0.98, top=1 - 0.45 / height, bottom=0.55 / height, wspace=0.3)
    y = np.arange(n)
    lo, hi = robot.lower, robot.upper
    for j in range(n):
        _, u = _units(robot, j)
        if np.isfinite(lo[j]) and np.isfinite(hi[j]):
            axes[0].barh(j, hi[j] - lo[j], left=lo[j], color="0.88", edgecolor="0.6", height=0.6, label="joint range" if j == 0 else None)
        axes[0].barh(j, np.ptp(q[:, j]), left=q[:, j].min(), color="C0", height=0.35, label="range used by the data" if j == 0 else None)
        vmax = robot.velocity_limit[j]
        if np.isfinite(vmax):
            axes[1].barh(j, 2 * vmax, left=-vmax, color="0.88", edgecolor="0.6", height=0.6, label="velocity limit" if j == 0 else None)
        axes[1].barh(j, np.ptp(dq[:, j]), left=dq[:, j].min(), color="C1", height=0.35, label="velocity used" if j == 0 else None)
    for ax, xl in zip(axes, ("position (rad; m for prismatic)", "velocity (rad/s; m/s for prismatic)")):
        ax.set_yticks(y, robot.joint_names, fontsize=8)
        ax.invert_yaxis()
        ax.set_xlabel(xl)
        ax.grid(alpha=0.3, axis="x")
    axes[0].legend(fontsize=7, loc="lower left", bbox_to_anchor=(0, 1.0), ncol=2, frameon=False)
    axes[1].legend(fontsize=7, loc="lower left", bbox_to_anchor=(0, 1.0), ncol=2, frameon=False)
    return _png(fig)


def _condition(robot: Robot, terms, q, dq, ddq) -> float:
    """Condition number of the column-scaled base regressor on the data (sample-thinned to <= 4000 states)."""
    from ..arm.regressor import regressor

    bp = base_parameters(robot, terms)
    stride = max(1, q.shape[0] // 4000)
    Yb = bp.columns(regressor(robot, q[::stride], dq[::stride], ddq[::stride], terms)).reshape(-1, bp.n_base)
    norms = np.linalg.norm(Yb, axis=0)
    if np.any(norms == 0):
        return float("inf")
    s = np.linalg.svd(Yb / norms, compute_uv=False)
    return float(s[0] / s[-1]) if s[-1] > 0 else float("inf")


def _data_rows(data) -> list[list]:
    rows = []
    for f in data.info.get("files", []):
        rows.append([f.get("path", ""), f.get("samples", ""), f"{f.get('duration', float('nan')):.2f}", f"{f.get('rate', float('nan')):.4g}", f.get("segments", "")])
    return rows


def render_report(robot: Robot, ps: ParameterSet, validation: Validation | None = None, validation_data=None,
                  fit_data=None, reference: ParameterSet | None = None, title: str | None = None, progress: bool = False) -> str:
    """The report as one HTML string.

    Parameters
    ----------
    robot : the model; `ps` must belong to it.
    ps : identified parameters (with their base table and diagnostics when they come from a fit).
    validation : optional :class:`ident.handover.check.Validation` on held-out data (plots and table).
    validation_data, fit_data : optional :class:`ident.data.dataset.Dataset` of the held-out and fit logs (summaries,
        excitation quality).
    reference : optional known parameters (e.g. the truth of simulated data) shown beside the estimates.
    title : page title (default from the robot name).
    """
    with Progress(6, "report", enabled=progress) as bar:
        return _render(robot, ps.check_robot(robot), validation, validation_data, fit_data, reference, title, bar)


def _render(robot, ps, validation, validation_data, fit_data, reference, title, bar) -> str:
    terms = tuple(ps.terms)
    bp = base_parameters(robot, terms)
    title = title or f"Identification report: {robot.name}"
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>{_e(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>",
             f"<h1>{_e(title)}</h1>",
             f'<p class="note">Written by ident on {datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")}. '
             f"Method: {_e(ps.method.get('name', 'unknown'))}. Joint terms: {_e(', '.join(terms) or 'none')}. SI units throughout.</p>"]

    # -- the arm and the data ---------------------------------------------------------------
    parts.append("<h2>1. The arm and the data</h2>")
    parts.append(f"<p>{_e(robot.describe())}; description <code>{_e(robot.source)}</code>; gravity {_e(np.round(robot.gravity, 4).tolist())} m/s\u00b2.</p>")
    rows = []
    for j, name in enumerate(robot.joint_names):
        _, u = _units(robot, j)
        lim = lambda x: f"{x:.4g}" if np.isfinite(x) else "-"  # noqa: E731
        rows.append([name, "prismatic" if robot.joint_type[j] == PRISMATIC else "revolute", robot.body_names[j],
                     ", ".join(robot.merged[j][1:]) or "-", f"{lim(robot.lower[j])} .. {lim(robot.upper[j])} {u}",
                     lim(robot.velocity_limit[j]), lim(robot.effort_limit[j])])
    parts.append(_table(["joint", "type", "moves link", "links merged into it", "range", "velocity limit", "effort limit"], rows,
                        [False] * 5 + [True, True]))
    if robot.locked:
        parts.append(f"<p>Locked joints: {_e(', '.join(f'{k} = {v:g}' for k, v in robot.locked.items()))}.</p>")
    for label, data in (("Fit data", fit_data), ("Held-out data", validation_data)):
        if data is not None:
            parts.append(f"<p><b>{label}</b>: {data.n_samples} conditioned samples"
                         f" (low-pass cutoff {_e(data.info.get('cutoff'))} Hz).</p>")
            parts.append(_table(["log", "samples read", "duration (s)", "rate (Hz)", "segments"], _data_rows(data), [False, True, True, True, True]))
    if ps.data:
        record = "; ".join(f"{k}: {json.dumps(v, default=str)}" for k, v in ps.data.items())
        parts.append(f"<p class=\"note\">Data recorded in the parameter file: {_e(record)}</p>")
    bar.update(1, "data")

    # -- what the data can identify ------------------------------------------------------------
    parts.append("<h2>2. What joint torques can identify</h2>")
    parts.append(f"<p>{bp.n_full} parameters in the model ({10 * robot.n} inertial, {bp.n_full - 10 * robot.n} joint terms); "
                 f"{bp.n_base} base parameters are identifiable, {len(bp.regrouped)} parameters regroup into them and "
                 f"{len(bp.zero)} never affect the torque. The regroupings:</p>")
    rel = [r for r in bp.relations() if "=" in r and r.split("=")[0].strip() != r.split("=")[1].strip()]
    parts.append("<pre class=\"wrap\">" + _e("\n".join(rel) if rel else "(none)") + "</pre>")
    bar.update(2, "base")

    # -- excitation quality ------------------------------------------------------------------------
    parts.append("<h2>3. How well the motion excites the model</h2>")
    cond = ps.diagnostics.get("condition_number") if ps.diagnostics else None
    if fit_data is not None and cond is None:
        cond = _condition(robot, terms, fit_data.q, fit_data.dq, fit_data.ddq)
    if cond is not None:
        verdict = "good" if cond < 100 else ("usable" if cond < 1000 else "poor")
        parts.append(f"<p>Condition number of the column-scaled base regressor on the fit data: <b>{float(cond):.4g}</b> "
                     f"({verdict}; below about 100 is common practice for a well-designed excitation).</p>")
    unexc = (ps.diagnostics or {}).get("unexcited_directions") or []
    if unexc:
        parts.append("<p class=\"bad\">Directions the data barely excite (the prior decides them in a consistent fit):</p><pre>" + _e("\n".join(unexc)) + "</pre>")
    if fit_data is not None:
        parts.append(_fig_coverage(robot, fit_data.q, fit_data.dq))
    elif validation_data is not None:
        # the plot must show the data its condition number is for: the held-out motion gets its own
        hcond = _condition(robot, terms, validation_data.q, validation_data.dq, validation_data.ddq)
        parts.append("<p>The fit data are not part of this report; the figure below is the held-out motion, whose "
                     f"condition number is <b>{float(hcond):.4g}</b>.</p>"
                     + _fig_coverage(robot, validation_data.q, validation_data.dq))
    bar.update(3, "excitation")

    # -- identified values --------------------------------------------------------------------------
    parts.append("<h2>4. Identified values</h2>")
    ref_beta = None
    if reference is not None:
        ref = reference.check_robot(robot)
        cols = [ref.inertial.reshape(-1)]
        if terms:
            cols.append(np.column_stack([ref.joint_params.get(c, np.zeros(robot.n)) for c in terms]).reshape(-1))
        ref_beta = bp.project(np.concatenate(cols))
    if ps.base is not None and len(ps.base.names) == bp.n_base:
        rows = []
        for k, (nm, v, s) in enumerate(zip(ps.base.names, ps.base.values, ps.base.std)):
            rs = 100 * s / abs(v) if v != 0 and np.isfinite(s) else np.inf
            flag = ("<span class=\"bad\">poor</span>", "") if rs > POOR_REL_STD else ("", "")
            row = [nm, f"{v:.6g}", f"{s:.3g}" if np.isfinite(s) else "-", f"{rs:.3g}" if np.isfinite(rs) else "inf", flag]
            if ref_beta is not None:
                row.insert(2, f"{ref_beta[k]:.6g}")
            rows.append(row)
        heads = ["base parameter", "estimate", "std", "rel. std %", "flag"]
        if ref_beta is not None:
            heads.insert(2, "reference")
        parts.append(f"<p>Base parameters with standard deviations (flag: relative std above {POOR_REL_STD:g} %, common practice).</p>")
        parts.append(_table(heads, rows, [False] + [True] * (len(heads) - 2) + [False]))
    checks = link_checks(ps)
    rows = []
    for i, body in enumerate(ps.body_names):
        pi = ps.inertial[i]
        lk = checks[i]
        if pi[0] > 0:
            com = pi[1:4] / pi[0]
            comtxt = ", ".join(f"{x:.4f}" for x in com)
        else:
            comtxt = "-"
        ok = ('<span class="ok">yes</span>', "") if lk.physical else (f'<span class="bad">no</span> {_e(lk.reason)}', "")
        row = [body, f"{pi[0]:.4g}", comtxt, f"{lk.eigenvalues[0]:.3g}", ok]
        if reference is not None:
            row.insert(2, f"{reference.check_robot(robot).inertial[i, 0]:.4g}")
        rows.append(row)
    heads = ["link", "mass (kg)", "COM x, y, z (m, link frame)", "min eig. pseudo-inertia", "physically consistent"]
    if reference is not None:
        heads.insert(2, "reference mass")
    parts.append("<p>One realization per link (for a consistent fit: the one closest to the description where the data are silent).</p>")
    parts.append(_table(heads, rows, [False, True] + ([True] if reference is not None else []) + [False, True, False]))
    if terms:
        rows = []
        for j, name in enumerate(robot.joint_names):
            row = [name] + [f"{ps.joint_params[c][j]:.4g}" for c in terms]
            if reference is not None:
                ref = reference.check_robot(robot)
                row += [f"{ref.joint_params[c][j]:.4g}" if c in ref.joint_params else "-" for c in terms]
            rows.append(row)
        units = {"fv": "fv (N m s/rad)", "fc": "fc (N m)", "fo": "fo (N m)", "ia": "ia (kg m\u00b2)"}
        heads = ["joint"] + [units.get(c, f"{c} (N m)") for c in terms] + ([f"reference {c}" for c in terms] if reference is not None else [])
        parts.append(_table(heads, rows, [False] + [True] * (len(heads) - 1)))
    if fit_data is not None and any(c in DRY_FRICTION_TERMS or c == "fv" for c in ps.terms):
        parts.append("<p>Friction against velocity: the torque the identified rigid bodies and armature leave "
                     "unexplained in the fit data, binned (mean and spread), and the fitted friction law"
                     + (" and the reference's" if reference is not None else "") + ":</p>")
        others = {"reference": reference} if reference is not None else None
        parts.append(_png(friction_figure(friction_curves(robot, ps, fit_data, others))))
    bar.update(4, "values")

    # -- held-out check -----------------------------------------------------------------------------
    parts.append("<h2>5. Held-out check</h2>")
    if validation is None:
        parts.append("<p class=\"bad\">No held-out data were given: the model has not been checked on motion it was not fitted to.</p>")
    else:
        rows = [[j, int(validation.samples[i]), f"{validation.rms[i]:.4g}", f"{validation.nrms_pct[i]:.2f}", f"{validation.r2[i]:.4f}",
                 f"{validation.max_error[i]:.4g}", f"{validation.max_error_time[i]:.3f}"] for i, j in enumerate(validation.joint_names)]
        parts.append(_table(["joint", "samples", "RMS error", "RMS / torque range %", "R\u00b2", "largest error", "at t (s)"], rows,
                            [False] + [True] * 6))
        if validation.classes:
            parts.append("<p>Against the noise:</p><pre>" + _e(validation.noise_table()) + "</pre>")
        if validation.collision:
            parts.append("<p>Collision detection:</p><pre>" + _e(validation.collision_table()) + "</pre>")
        for note in validation.notes:
            parts.append(f"<p class=\"note\">{_e(note)}</p>")
        parts.append("<p>Measured and predicted torque per joint, the residual, and its histogram:</p>")
        parts.append(_fig_validation(robot, validation))
    bar.update(5, "plots")

    # -- cautions -------------------------------------------------------------------------------
    from ..text import SAFETY_CAUTIONS

    parts.append("<h2>6. Before you use this model</h2><ul>")
    cautions = []
    bad = [lk.name for lk in checks if not lk.physical]
    if bad:
        cautions.append(f"Links {', '.join(bad)} are not physically consistent: do not use them in a simulator or a "
                        "controller; refit with the consistent method.")
    if ps.base is not None:
        poor = [nm for nm, v, s in zip(ps.base.names, ps.base.values, ps.base.std) if v != 0 and np.isfinite(s) and 100 * s / abs(v) > POOR_REL_STD]
        if poor:
            cautions.append(f"{len(poor)} base parameter(s) are poorly identified ({', '.join(poor[:8])}{', ...' if len(poor) > 8 else ''}); "
                            "a richer excitation would pin them down.")
    cautions.append("Only the base parameters are determined by the data; the per-link split shown above is one "
                    "realization among many that predict the same torques.")
    cautions.append("The model is valid for the payload, temperature and speed range of the data; friction changes "
                    "with temperature and wear.")
    for data in (fit_data, validation_data):
        if data is not None:
            cautions += [f"Data: {w}" for w in data.warnings]
    parts += [f"<li>{_e(c)}</li>" for c in cautions]
    parts.append("</ul>")
    parts.append("<pre>" + _e(SAFETY_CAUTIONS) + "</pre>")
    parts.append("</body>\n</html>\n")
    bar.update(6, "done")
    return "\n".join(parts)


def write_report(path, robot: Robot, ps: ParameterSet, **kwargs) -> None:
    """Render the report (see :func:`render_report` for the keyword arguments) and write it atomically."""
    if not str(path).lower().endswith((".html", ".htm")):
        raise IdentError(f"--report: '{path}' should end in .html")
    write_text(path, render_report(robot, ps, **kwargs))
