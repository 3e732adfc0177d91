"""Friction drift as a wear signal: flags against an arm's own baseline and against the fleet.

**Own baseline.** For each arm, joint and watched friction parameter (:data:`WATCH`), the baseline
is the mean of its estimates over the arm's first `baseline` periods (or the estimate of one
reference period), with variance ``sum(s_i^2) / m^2`` (independent logs). Every later period p is
compared: ``z = (x_p - x_base) / sqrt(s_p^2 + s_base^2)``; the joint is flagged at the first
period with ``|z| > k``. Under honest standard deviations (the block jackknife of
:mod:`ident.estimation.uncertainty`, whose Monte Carlo coverage is checked in the tests) and no
change, z is close to a t variable with (blocks - 1) degrees of freedom, so one comparison raises a
false alarm with probability :func:`false_alarm_rate` (k = 4: 6.3e-5 for a normal z, 7.6e-4 with
19 degrees of freedom); an arm-joint-parameter watched over P periods raises one with probability
at most P times that.

**Fleet median.** In the latest period, for each description (arms of the same model) with at
least :data:`MIN_ARMS` arms, each arm is compared with the OTHER arms: their median and their
standard deviation s_o (m arms; the spread the fleet really has, as-built differences included);
the arm is flagged when ``|x - median_o| > k_fleet sqrt(s_o^2 (1 + 1/m) + s^2)`` (a prediction
interval for one more arm, so the arm's own outlying value does not widen its yardstick). With
normal as-built spread this is close to a t variable with m - 1 degrees of freedom: k_fleet = 5
(:data:`FLEET_ALARM`) gives 0.25 % per comparison with 7 others, 0.0008 % with 49.

Each :class:`Flag` names the arm, joint, parameter, kind, period (label and first day), the size
of the change (estimate minus reference, and relative) and its number of combined standard deviations.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import IdentError

#: Friction parameters watched by default: viscous friction and the dry-friction level at speed in
#: each direction (the physical quantities whatever dry-friction terms each period's fit chose; the
#: individual shape coefficients trade the step between them from one period to the next).
WATCH = ("fv", "dry_pos", "dry_neg")
#: Default alarm level, in combined standard deviations.
ALARM = 4.0
#: Default number of first periods that make an arm's baseline.
BASELINE_PERIODS = 2
#: Fewest arms of one description for the fleet-median check.
MIN_ARMS = 5
#: Default alarm level of the fleet comparison (prediction-interval widths; see the module notes).
FLEET_ALARM = 5.0


@dataclass
class Flag:
    """One alarm: which arm, joint and parameter, against what, when, and how large."""

    arm: str
    joint: str
    parameter: str
    kind: str
    period: str
    date: str
    estimate: float
    reference: float
    change: float
    relative: float
    sigmas: float

    def line(self) -> str:
        """One line for the console and the report."""
        return (f"{self.arm}: {self.joint}.{self.parameter} {self.change:+.4g} ({100 * self.relative:+.1f} %, "
                f"{self.sigmas:+.1f} sigma) against its {self.kind} from {self.period} ({self.date})")


def false_alarm_rate(k: float, dof: float | None = None) -> float:
    """Probability that |z| > k for one comparison without change: two-sided normal tail, or
    Student t with `dof` degrees of freedom (the jackknife over K blocks has about K - 1)."""
    if dof is None or not np.isfinite(dof):
        return float(2 * stats.norm.sf(k))
    return float(2 * stats.t.sf(k, dof))


def _split(name: str) -> tuple[str, str]:
    joint, _, code = name.rpartition(".")
    return joint, code


def _watched(table: pd.DataFrame, watch) -> pd.DataFrame:
    if table.empty:
        return table
    parts = table["parameter"].map(_split)
    t = table.assign(joint=[p[0] for p in parts], code=[p[1] for p in parts])
    t = t[t["code"].isin(list(watch)) & np.isfinite(t["estimate"]) & np.isfinite(t["std"])]
    return t.sort_values(["arm", "parameter", "period_start"])


def drift_flags(table: pd.DataFrame, k: float = ALARM, baseline: int = BASELINE_PERIODS, reference: str | None = None,
                watch=WATCH) -> list[Flag]:
    """Flags of joints whose friction left their own arm's baseline (module notes).

    table : the fleet table (columns arm, period, period_start, parameter, estimate, std).
    k : alarm level (combined standard deviations); baseline : first periods averaged;
    reference : a period label to use as the baseline instead.
    """
    if not (np.isfinite(k) and k > 0):
        raise IdentError(f"alarm level: must be a positive number of standard deviations, got {k}")
    if baseline < 1:
        raise IdentError(f"baseline periods: must be at least 1, got {baseline}")
    flags = []
    for (arm, name), rows in _watched(table, watch).groupby(["arm", "parameter"], sort=True):
        rows = rows.sort_values("period_start")
        if reference is not None:
            ref = rows[rows["period"] == reference]
            if ref.empty:
                continue
            later = rows[rows["period_start"] > ref["period_start"].iloc[0]]
        else:
            ref, later = rows.iloc[:baseline], rows.iloc[baseline:]
        if ref.empty or later.empty:
            continue
        x0 = float(ref["estimate"].mean())
        v0 = float((ref["std"] ** 2).sum()) / len(ref) ** 2
        for _, r in later.iterrows():
            s = np.sqrt(r["std"] ** 2 + v0)
            z = (r["estimate"] - x0) / s if s > 0 else 0.0
            if abs(z) > k:
                joint, code = _split(name)
                flags.append(Flag(arm, joint, code, "own baseline", r["period"], str(pd.Timestamp(r["period_start"]).date()),
                                  float(r["estimate"]), x0, float(r["estimate"] - x0), float((r["estimate"] - x0) / abs(x0)) if x0 else float("inf"),
                                  float(z)))
                break
    return flags


def fleet_flags(table: pd.DataFrame, k: float = FLEET_ALARM, watch=WATCH, min_arms: int = MIN_ARMS) -> list[Flag]:
    """Flags of arms far from the other arms of their description in its latest period (module notes)."""
    if not (np.isfinite(k) and k > 0):
        raise IdentError(f"fleet alarm level: must be a positive number of standard deviations, got {k}")
    t = _watched(table, watch)
    flags = []
    if t.empty:
        return flags
    for (_, name), rows in t.groupby(["description", "parameter"], sort=True):
        latest = rows.sort_values("period_start").groupby("arm").tail(1)
        if latest["arm"].nunique() < min_arms:
            continue
        x = latest["estimate"].to_numpy(float)
        for i, r in enumerate(latest.itertuples()):
            others = np.delete(x, i)
            med, m = float(np.median(others)), others.size
            s = np.sqrt(np.var(others, ddof=1) * (1 + 1 / m) + r.std**2)
            z = (r.estimate - med) / s if s > 0 else 0.0
            if abs(z) > k:
                joint, code = _split(name)
                flags.append(Flag(r.arm, joint, code, "fleet median", r.period, str(pd.Timestamp(r.period_start).date()),
                                  float(r.estimate), med, float(r.estimate - med),
                                  float((r.estimate - med) / abs(med)) if med else float("inf"), float(z)))
    return flags


def flags_table(flags: list[Flag]) -> pd.DataFrame:
    """The flags as a table (one row a flag)."""
    cols = list(Flag.__dataclass_fields__)
    return pd.DataFrame([asdict(f) for f in flags], columns=cols)
