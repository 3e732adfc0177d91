"""Validation of an identified model on held-out motion: torque errors per joint, physical consistency per link.

For each joint j (over the samples used, see `exclude_slow`)::

    e = tau_measured - tau_predicted
    RMS = sqrt(mean(e^2)),   NRMS % = 100 RMS / (max tau_measured - min tau_measured)
    R^2 = 1 - sum(e^2) / sum((tau_measured - mean)^2),   largest error = max |e|

Against the noise: per joint the expected floor (the RMS error a perfect model would leave on the
conditioned torque, :mod:`ident.handover.noise`) and RMS / floor, separately for *moving* samples
(neither slow nor stuck), *slow* samples (``Segment.slow``: |q'| below the slow-velocity
threshold or near a velocity reversal) and *stuck* samples (``Segment.stuck`` where the data set
flags them), for the parameters checked and for the description's own values (the prior), so the
gain of identification shows. A ratio near 1 means the model explains everything but the noise.
Collision-detection thresholds come from all residuals (:mod:`ident.handover.collision`).

A link is physically consistent when its 4x4 pseudo-inertia is positive semidefinite (Wensing,
Kim and Slotine 2017), which is equivalent to mass > 0, inertia about the COM positive
semidefinite and the triangle inequalities of the principal moments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..arm.dynamics import inverse_dynamics
from ..arm.model import DRY_FRICTION_TERMS, Robot
from ..arm.parameters import PHYSICAL_TOL, ParameterSet
from ..arm.spatial import check_physical, pseudo_inertia
from ..data.segments import widen_slow
from ..errors import DataError, IdentError
from .collision import FALSE_ALARM, collision_thresholds
from .noise import noise_floor

#: Sample classes of the noise comparison, in print order.
CLASSES = ("moving", "slow", "stuck")


@dataclass
class LinkCheck:
    """Physical consistency of one link: pseudo-inertia eigenvalues (4,) ascending, verdict, reason."""

    name: str
    eigenvalues: np.ndarray
    physical: bool
    reason: str = ""


@dataclass
class Validation:
    """Per-joint torque errors on held-out data and per-link consistency.

    Arrays (n,) per joint: ``rms``, ``nrms_pct``, ``r2``, ``max_error`` (N m or N), ``max_error_time`` (s),
    ``torque_range``, ``samples`` (used per joint). ``t`` (N,), ``measured``/``predicted`` (N, n) and
    ``used`` (N, n) bool keep the series for plots.
    """

    joint_names: list[str]
    rms: np.ndarray
    nrms_pct: np.ndarray
    r2: np.ndarray
    max_error: np.ndarray
    max_error_time: np.ndarray
    torque_range: np.ndarray
    samples: np.ndarray
    links: list[LinkCheck]
    t: np.ndarray
    measured: np.ndarray
    predicted: np.ndarray
    used: np.ndarray
    sources: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    floor: np.ndarray | None = None
    floor_method: str = ""
    classes: dict = field(default_factory=dict)
    collision: dict = field(default_factory=dict)

    @property
    def all_physical(self) -> bool:
        """True when every link is physically consistent."""
        return all(lk.physical for lk in self.links)

    def to_dict(self) -> dict:
        """JSON-ready summary (no series)."""
        return {
            "joints": [
                {"name": j, "rms": float(self.rms[i]), "nrms_percent": float(self.nrms_pct[i]), "r2": float(self.r2[i]),
                 "max_error": float(self.max_error[i]), "max_error_time": float(self.max_error_time[i]),
                 "torque_range": float(self.torque_range[i]), "samples": int(self.samples[i])}
                for i, j in enumerate(self.joint_names)
            ],
            "links": [
                {"name": lk.name, "physical": lk.physical, "pseudo_inertia_eigenvalues": lk.eigenvalues.tolist(), "reason": lk.reason}
                for lk in self.links
            ],
            "all_physical": self.all_physical,
            "noise_floor": {
                "method": self.floor_method,
                "joints": {j: (None if self.floor is None else float(self.floor[i])) for i, j in enumerate(self.joint_names)},
            },
            "against_noise": {
                c: {j: {k: _jf(v[i]) for k, v in figs.items()} for i, j in enumerate(self.joint_names)}
                for c, figs in self.classes.items()
            },
            "collision": self.collision,
            "logs": list(self.sources),
            "notes": list(self.notes),
        }

    def table(self) -> str:
        """Plain-text tables: torque errors per joint, then consistency per link."""
        from ..text import format_table

        rows = [[j, str(int(self.samples[i])), f"{self.rms[i]:.4g}", f"{self.nrms_pct[i]:.2f}", f"{self.r2[i]:.4f}",
                 f"{self.max_error[i]:.4g}", f"{self.max_error_time[i]:.3f}"] for i, j in enumerate(self.joint_names)]
        out = [format_table(["joint", "samples", "RMS error", "RMS/range %", "R^2", "largest error", "at t (s)"], rows, "lrrrrrr")]
        rows = [[lk.name, "yes" if lk.physical else "NO", f"{lk.eigenvalues[0]:.3g}", lk.reason] for lk in self.links]
        out.append(format_table(["link", "physical", "min eig. pseudo-inertia", "problem"], rows, "llrl"))
        if self.classes:
            out.append(self.noise_table())
        if self.collision:
            out.append(self.collision_table())
        return "\n\n".join(out)

    def noise_table(self) -> str:
        """Per joint: floor, then RMS / floor (and samples) per sample class, fit and prior."""
        from ..text import format_table

        heads = ["joint", "noise floor"]
        cls = [c for c in CLASSES if c in self.classes]
        for c in cls:
            heads += [f"{c} n", f"{c} RMS/floor", f"{c} prior"]
        rows = []
        for i, j in enumerate(self.joint_names):
            row = [j, "?" if self.floor is None else f"{self.floor[i]:.4g}"]
            for c in cls:
                f = self.classes[c]
                row += [str(int(f["samples"][i])), _ratio(f["ratio"][i], f["rms"][i]), _ratio(f["prior_ratio"][i], f["prior_rms"][i])]
            rows.append(row)
        text = format_table(heads, rows, "l" + "r" * (len(heads) - 1))
        how = f"noise floor: {self.floor_method}" if self.floor_method else ""
        return ("RMS error against the noise floor (1 = nothing left but noise; 'prior' = the description's own values"
                + ("; without a floor the RMS is shown" if self.floor is None else "") + ")\n" + text + ("\n" + how if how else ""))

    def collision_table(self) -> str:
        """Per joint: collision-detection threshold, how it was set and its held-out false-alarm rate."""
        from ..text import format_table

        c = self.collision
        rows = [[j, f"{v['threshold']:.4g}", v["method"], f"{v['heldout_rate']:.2g}"] for j, v in c["joints"].items()]
        head = (f"collision-detection thresholds for {c['false_alarm_rate']:g} false alarms per sample "
                f"({c['samples']} held-out samples; a starting point: confirm on the robot with its safety functions on)")
        return head + "\n" + format_table(["joint", "threshold N m|N", "set by", "held-out rate"], rows, "lrlr")


def _jf(x):
    x = float(x)
    return None if not np.isfinite(x) else x


def _ratio(ratio, rms) -> str:
    if np.isfinite(ratio):
        return f"{ratio:.3g}"
    return "-" if not np.isfinite(rms) else f"{rms:.3g} N m"


def link_checks(ps: ParameterSet, tol: float = PHYSICAL_TOL) -> list[LinkCheck]:
    """Physical consistency of every link of `ps` (pseudo-inertia PSD up to `tol` relative)."""
    ev = np.linalg.eigvalsh(pseudo_inertia(ps.inertial))
    ok = ps.physical(tol)
    out = []
    for i, name in enumerate(ps.body_names):
        reason = ""
        if not ok[i]:
            try:
                check_physical(ps.inertial[i], f"link '{name}'")
                reason = "pseudo-inertia not positive semidefinite"
            except IdentError as exc:
                reason = str(exc).split(": ", 1)[-1]
        out.append(LinkCheck(name, ev[i], bool(ok[i]), reason))
    return out


def _class_figures(tau, pred, prior_pred, masks: dict, floor) -> dict:
    out = {}
    for c, m in masks.items():
        cnt = m.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            rms = np.sqrt(np.where(m, (tau - pred) ** 2, 0).sum(axis=0) / cnt)
            prms = np.sqrt(np.where(m, (tau - prior_pred) ** 2, 0).sum(axis=0) / cnt)
            fl = np.full(tau.shape[1], np.nan) if floor is None else floor
            out[c] = {"samples": cnt, "rms": np.where(cnt > 0, rms, np.nan), "ratio": np.where(cnt > 0, rms / fl, np.nan),
                      "prior_rms": np.where(cnt > 0, prms, np.nan), "prior_ratio": np.where(cnt > 0, prms / fl, np.nan)}
    return out


def validate(robot: Robot, ps: ParameterSet, t, q, dq, ddq, tau, slow=None, sources=(), stuck=None, dry=None, *, floor=None,
             floor_method: str = "", false_alarm: float | None = FALSE_ALARM) -> Validation:
    """Compare measured torque with the model's prediction and check each link.

    Parameters
    ----------
    robot : the model; `ps` must belong to it (checked, reordered to its joints).
    ps : identified parameters.
    t : (N,) s; q, dq, ddq, tau : (N, n) conditioned samples (rad, rad/s, rad/s^2, N m; m, N for prismatic).
    slow : optional (N, n) bool: samples where |q'| is below the slow-velocity threshold. They are
        left out of joint j's figures because the Coulomb term sign(q') is undefined there.
    sources : names of the logs, for the record.
    stuck : optional (N, n) bool: stretches where a joint stands still (its friction is anything up
        to breakaway): left out of that joint's figures.
    dry : optional (N, n, 4) dry-friction signals filtered like the torque (``Dataset.dry``): the
        prediction then smears each Coulomb step as the measured torque's filter did.
    floor : optional (n,) noise floor of the compared torque (N m or N), with `floor_method` saying
        how it was estimated; the RMS / floor figures are NaN without it.
    false_alarm : per-sample false-alarm rate of the collision thresholds (None: none computed).
    """
    ps = ps.check_robot(robot)
    q, dq, ddq, tau = robot.check_states(q, dq, ddq, tau, names=("q", "dq", "ddq", "tau"))
    t = np.asarray(t, dtype=float).reshape(-1)
    N, n = tau.shape
    if t.size != N:
        raise DataError(f"validation: {t.size} times for {N} samples")
    if N < 2:
        raise DataError(f"validation: needs at least 2 samples, got {N}")
    pred = inverse_dynamics(robot, q, dq, ddq, ps.inertial, ps.joint_params, dry=dry)
    used = np.ones((N, n), dtype=bool)
    notes = []
    if slow is not None:
        slow = np.asarray(slow, dtype=bool).reshape(N, n)
        if any(c in DRY_FRICTION_TERMS and np.any(ps.joint_params[c] != 0) for c in ps.terms):
            used &= ~slow
            notes.append(f"left out {int(slow.sum())} joint samples within the velocity noise of zero or the filter's reach of it (friction sign undefined)")
    if stuck is not None:
        stuck = np.asarray(stuck, dtype=bool).reshape(N, n)
        if stuck.any():
            used &= ~stuck
            notes.append(f"left out {int(stuck.sum())} joint samples where a joint stands still (stuck: friction undetermined)")
    rms = np.empty(n)
    nrms = np.empty(n)
    r2 = np.empty(n)
    emax = np.empty(n)
    tmax = np.empty(n)
    rng_ = np.empty(n)
    count = used.sum(axis=0)
    for j in range(n):
        if count[j] < 2:
            raise DataError(f"validation: joint '{robot.joint_names[j]}' has fewer than 2 usable samples (does it move?)")
        m = used[:, j]
        y = tau[m, j]
        e = y - pred[m, j]
        rms[j] = np.sqrt(np.mean(e**2))
        rng_[j] = np.ptp(y)
        nrms[j] = 100.0 * rms[j] / rng_[j] if rng_[j] > 0 else np.inf
        ss = np.sum((y - y.mean()) ** 2)
        r2[j] = 1.0 - np.sum(e**2) / ss if ss > 0 else np.nan
        k = int(np.argmax(np.abs(e)))
        emax[j] = abs(e[k])
        tmax[j] = t[m][k]
    val = Validation(list(robot.joint_names), rms, nrms, r2, emax, tmax, rng_, count, link_checks(ps), t, tau, pred, used,
                     list(map(str, sources)), notes)
    slow_m = np.zeros((N, n), dtype=bool) if slow is None else slow
    masks = {}
    if stuck is not None:
        stuck = np.asarray(stuck, dtype=bool).reshape(N, n)
        masks["moving"] = ~slow_m & ~stuck
        masks["slow"] = slow_m & ~stuck
        masks["stuck"] = stuck
    else:
        masks["moving"] = ~slow_m
        masks["slow"] = slow_m
    prior_pred = inverse_dynamics(robot, q, dq, ddq, robot.prior)
    val.floor = None if floor is None else np.asarray(floor, dtype=float).reshape(n)
    val.floor_method = floor_method
    val.classes = _class_figures(tau, pred, prior_pred, masks, val.floor)
    if false_alarm is not None:
        try:
            val.collision = collision_thresholds(robot.joint_names, tau - pred, false_alarm)
        except IdentError as exc:  # too short a log for that rate: the rest of the check still stands
            val.notes.append(f"no {exc}")
    return val


def validate_dataset(robot: Robot, ps: ParameterSet, data, raw=None, false_alarm: float | None = FALSE_ALARM) -> Validation:
    """:func:`validate` on an :class:`ident.data.dataset.Dataset`: its ``slow`` flags, widened by
    :data:`ident.data.segments.SIGN_SPREAD` cutoff periods (:func:`ident.data.segments.widen_slow`),
    and, where the segments carry them, its ``stuck`` flags are honoured and the noise floor is estimated from it,
    or from `raw` (the same logs read by :func:`ident.data.load.read_logs`) when the data set has
    no period-averaging estimate (see :func:`ident.handover.noise.noise_floor`)."""
    info = getattr(data, "info", None) or {}
    slow = None
    if all(getattr(s, "slow", None) is not None for s in data.segments) and data.segments:
        slow = np.concatenate([widen_slow(s.slow, s.dt, info.get("cutoff")) for s in data.segments], axis=0)
    stuck_parts = [getattr(s, "stuck", None) for s in data.segments]
    stuck = np.concatenate(stuck_parts, axis=0) if stuck_parts and all(p is not None for p in stuck_parts) else None
    srcs = [f["path"] for f in info.get("files", [])]
    floor, how = noise_floor(data, raw)
    val = validate(robot, ps, data.t, data.q, data.dq, data.ddq, data.tau, slow, srcs, stuck, getattr(data, "dry", None), floor=floor,
                   floor_method=how, false_alarm=false_alarm)
    if info.get("cutoff"):
        # parallel filtering: the measured torque went through the positions' low-pass, which also
        # removes the part of its noise above the cutoff
        val.notes.append(f"measured torque low-pass filtered at {info['cutoff']:g} Hz like the positions (parallel filtering)")
    return val
