"""Validation of an identified model on held-out motion: torque errors per joint, physical consistency per link.

For each joint j (over the samples used, see `exclude_slow`)::

    e = tau_measured - tau_predicted
    RMS = sqrt(mean(e^2)),   NRMS % = 100 RMS / (max tau_measured - min tau_measured)
    R^2 = 1 - sum(e^2) / sum((tau_measured - mean)^2),   largest error = max |e|

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
from ..errors import DataError, IdentError


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
        return "\n\n".join(out)


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


def validate(robot: Robot, ps: ParameterSet, t, q, dq, ddq, tau, slow=None, sources=(), stuck=None, dry=None) -> Validation:
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
            notes.append(f"left out {int(slow.sum())} joint samples within the velocity noise of zero (friction sign undefined)")
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
    return Validation(list(robot.joint_names), rms, nrms, r2, emax, tmax, rng_, count, link_checks(ps), t, tau, pred, used,
                      list(map(str, sources)), notes)


def validate_dataset(robot: Robot, ps: ParameterSet, data) -> Validation:
    """:func:`validate` on an :class:`ident.data.dataset.Dataset` (its ``slow`` flags are honoured)."""
    slow = getattr(data, "slow", None)
    info = getattr(data, "info", None) or {}
    srcs = [f["path"] for f in info.get("files", [])]
    val = validate(robot, ps, data.t, data.q, data.dq, data.ddq, data.tau, slow, srcs, getattr(data, "stuck", None), getattr(data, "dry", None))
    if info.get("cutoff"):
        # parallel filtering: the measured torque went through the positions' low-pass, which also
        # removes the part of its noise above the cutoff
        val.notes.append(f"measured torque low-pass filtered at {info['cutoff']:g} Hz like the positions (parallel filtering)")
    return val
