"""What a fleet run leaves behind: the results table, each arm's latest parameter file, the flags.

Output folder (written at once, :func:`ident.fileio.atomic_folder`):

* ``fleet.parquet`` : one row per arm, period and base parameter, plus per joint the dry-friction
  level at speed in each direction (``<joint>.dry_pos``, ``<joint>.dry_neg``:
  ``FitResult.dry_friction``, with its std): ``arm``, ``description``,
  ``period``, ``period_start``, ``parameter``, ``estimate``, ``std``, ``samples``, ``logs``, and the
  fit's diagnostics ``method``, ``terms``, ``uncertainty`` (jackknife or classic), ``blocks``,
  ``condition``, ``residual_rms`` (RMS over the joints of each joint's residual), ``warnings``;
* ``params/<arm>.yaml`` : the arm's latest period as a parameter file (the format of ``ident fit``);
* ``flags.csv`` : the drift and fleet flags (:mod:`ident.fleet.drift`);
* ``failures.csv`` : the logs and periods that could not be used, with the reason;
* ``report.html`` : the fleet report (:mod:`ident.fleet.report`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..arm.model import DRY_FRICTION_TERMS
from ..arm.parameters import make_context
from ..handover.paramfile import save_parameters
from .catalog import Group

TABLE = "fleet.parquet"

#: Codes of the dry-friction levels at speed in the table (positive and negative direction):
#: with several dry-friction terms these, not the individual coefficients, are what wear changes.
DRY_LEVEL_CODES = ("dry_pos", "dry_neg")


def results_table(groups: list[Group], fits: dict) -> pd.DataFrame:
    """The fleet table (module notes) from the groups and their :class:`ident.fleet.tasks.PeriodFit`."""
    rows = []
    for g in groups:
        pf = fits.get((g.arm, g.period))
        if pf is None:
            continue
        r = pf.result
        std = r.std
        diag = {"method": r.method, "terms": ",".join(r.terms), "uncertainty": r.uncertainty.get("method", "classic"),
                "blocks": int(r.uncertainty.get("blocks", 0)), "condition": float(r.condition),
                "residual_rms": float(np.sqrt(np.mean(np.asarray(r.residual_rms, float) ** 2))), "warnings": len(r.warnings) + len(pf.warnings)}
        values = list(zip(r.names, r.beta, std))
        if any(c in DRY_FRICTION_TERMS for c in r.terms):
            for joint, levels in zip(r.robot.joint_names, r.dry_friction):
                for code, (est, s) in zip(DRY_LEVEL_CODES, levels):
                    values.append((f"{joint}.{code}", est, np.nan if s is None else s))
        for name, est, s in values:
            rows.append(dict(arm=g.arm, description=g.description, period=g.period, period_start=g.start, parameter=name,
                             estimate=float(est), std=float(s), samples=int(r.samples), logs=len(pf.logs), **diag))
    cols = ["arm", "description", "period", "period_start", "parameter", "estimate", "std", "samples", "logs", "method", "terms",
            "uncertainty", "blocks", "condition", "residual_rms", "warnings"]
    return pd.DataFrame(rows, columns=cols)


def latest_fits(groups: list[Group], fits: dict) -> dict:
    """{arm: (group, PeriodFit)} of each arm's latest fitted period."""
    out = {}
    for g in groups:  # groups come sorted by arm, then period start
        if (g.arm, g.period) in fits:
            out[g.arm] = (g, fits[(g.arm, g.period)])
    return out


def parameter_set(pf):
    """The parameter set ``ident fit`` would write for the logs of one period fit."""
    res = pf.result
    ps = res.to_parameter_set(data={"files": list(pf.logs), "warnings": list(pf.warnings)})
    ps.context = make_context(res.robot, dict(pf.options))
    return ps


def write_outputs(folder: Path, table: pd.DataFrame, latest: dict, flags: pd.DataFrame, failures, report_html: str) -> None:
    """Write every output file into `folder` (a temporary folder of :func:`ident.fileio.atomic_folder`)."""
    folder = Path(folder)
    table.to_parquet(folder / TABLE, index=False)
    (folder / "params").mkdir()
    for arm, (_, pf) in latest.items():
        save_parameters(folder / "params" / f"{arm}.yaml", parameter_set(pf))
    flags.to_csv(folder / "flags.csv", index=False)
    pd.DataFrame([{"name": f.name, "reason": f.message} for f in failures], columns=["name", "reason"]).to_csv(folder / "failures.csv", index=False)
    (folder / "report.html").write_text(report_html, encoding="utf-8")
