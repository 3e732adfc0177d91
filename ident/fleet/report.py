"""The fleet report: one self-contained HTML page (figures embedded as PNG, the hand-over report's style).

Sections: the run (arms, periods, logs, failures); flagged arms (drift against the arm's own
baseline, distance from the fleet median); per description and watched friction parameter, each
joint's estimate against time for every arm with its 2-sigma band, over the fleet's spread
(median and the band between the 10th and 90th percentiles across arms); the false-alarm rate of
the alarm level.
"""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pandas as pd

from ..handover.report import _CSS, _e, _png, _table
from .drift import WATCH, false_alarm_rate


def _figure(rows: pd.DataFrame, code: str, flagged: set) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    joints = sorted(rows["joint"].unique(), key=lambda j: list(rows["joint"]).index(j))
    fig, axes = plt.subplots(len(joints), 1, figsize=(9, 2.3 * len(joints)), squeeze=False, sharex=True)
    for ax, joint in zip(axes[:, 0], joints):
        r = rows[rows["joint"] == joint]
        spread = r.groupby("period_start")["estimate"].agg([("lo", lambda x: np.percentile(x, 10)), ("med", "median"),
                                                            ("hi", lambda x: np.percentile(x, 90))]).sort_index()
        ax.fill_between(spread.index, spread["lo"], spread["hi"], color="#ddd", label="fleet 10-90 %")
        ax.plot(spread.index, spread["med"], color="#888", lw=2, label="fleet median")
        for arm, a in r.groupby("arm"):
            a = a.sort_values("period_start")
            hot = (arm, joint) in flagged
            line = ax.plot(a["period_start"], a["estimate"], marker="o", ms=3, lw=2 if hot else 0.8, alpha=1 if hot else 0.6,
                           label=arm if hot else None)[0]
            ax.fill_between(a["period_start"], a["estimate"] - 2 * a["std"], a["estimate"] + 2 * a["std"], color=line.get_color(), alpha=0.15)
        ax.set_ylabel(f"{joint}.{code}")
        ax.grid(alpha=0.3)
        ax.legend(fontsize=7, loc="upper left", ncol=4)
    axes[-1, 0].set_xlabel("period")
    fig.tight_layout()
    return _png(fig)


def render_fleet_report(table: pd.DataFrame, flags: pd.DataFrame, failures, settings: dict, watch=WATCH) -> str:
    """The HTML page (a string). table: the fleet table; flags: :func:`ident.fleet.drift.flags_table`;
    failures: :class:`ident.fleet.tasks.Failed` records; settings: alarm level, baseline, method, terms..."""
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    n_arms = table["arm"].nunique() if not table.empty else 0
    n_periods = table[["arm", "period"]].drop_duplicates().shape[0] if not table.empty else 0
    parts = [f"<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>Fleet report</title>\n<style>{_CSS}</style>\n</head>\n<body>",
             "<h1>Fleet report</h1>", f"<p class=\"note\">Made {stamp} by ident fleet.</p>", "<h2>The run</h2>",
             _table(["item", "value"], [["arms", n_arms], ["fitted arm-periods", n_periods], ["failures", len(failures)]]
                    + [[k, v] for k, v in settings.items()])]
    if failures:
        parts += ["<h3>Not used</h3>", _table(["log or period", "reason"], [[f.name, f.message] for f in failures])]
    parts.append("<h2>Flagged arms</h2>")
    if flags.empty:
        parts.append('<p class="ok">No joint left its baseline or the fleet by more than the alarm level.</p>')
    else:
        rows = [[f.arm, f.joint, f.parameter, f.kind, f.period, f.date, f"{f.estimate:.4g}", f"{f.reference:.4g}", f"{f.change:+.4g}",
                 f"{100 * f.relative:+.1f} %", f"{f.sigmas:+.1f}"] for f in flags.itertuples()]
        parts.append(_table(["arm", "joint", "parameter", "against", "period", "from", "estimate", "reference", "change", "relative", "sigmas"],
                            rows, [False] * 6 + [True] * 5))
    k = float(settings.get("alarm level (sigmas)", 4.0))
    dof = float(table["blocks"].min() - 1) if not table.empty and table["blocks"].min() > 1 else None
    parts.append(f"<p class=\"note\">False-alarm rate of one comparison at {k:g} sigma with honest standard deviations: "
                 f"{false_alarm_rate(k):.2g} (normal), {false_alarm_rate(k, dof) if dof else float('nan'):.2g} "
                 f"(t with {dof:g} degrees of freedom, the jackknife over the fewest blocks).</p>" if dof else
                 f"<p class=\"note\">False-alarm rate of one comparison at {k:g} sigma (normal): {false_alarm_rate(k):.2g}.</p>")
    if not table.empty:
        parts.append("<h2>Friction against time</h2><p class=\"note\">Each arm's estimate with its 2-sigma band; grey: the fleet's "
                     "median and its 10-90 % band across arms; thick lines: flagged arms.</p>")
        tt = table.assign(joint=table["parameter"].str.rpartition(".")[0], code=table["parameter"].str.rpartition(".")[2])
        flagged = set(zip(flags["arm"], flags["joint"])) if not flags.empty else set()
        for desc, d in tt.groupby("description"):
            for code in watch:
                rows = d[d["code"] == code]
                if rows.empty:
                    continue
                parts += [f"<h3>{_e(code)} of the arms described by {_e(desc)}</h3>", _figure(rows, code, flagged)]
    parts.append("</body></html>")
    return "\n".join(parts)
