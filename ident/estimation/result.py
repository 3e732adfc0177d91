"""The fit's result: estimates, uncertainties and diagnostics, a statsmodels-style table, and the parameter set it stands for.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..arm.base import BaseParameters
from ..arm.dynamics import term_columns
from ..arm.model import DRY_FRICTION_TERMS, Robot
from ..arm.parameters import PHYSICAL_TOL, BaseTable, ParameterSet, parameter_set_from_vector
from ..arm.spatial import from_vector, pseudo_inertia
from ..errors import IdentError

METHODS = ("ols", "wls", "consistent")


#: Default joint terms (the CLI's default too).
DEFAULT_TERMS = ("fv", "fc", "ia")


#: Speed (rad/s or m/s) at which the dry-friction level is read: every low-speed shape has saturated.
LEVEL_SPEED = 1.0


#: Relative standard deviation (%) above which a base parameter is flagged (common practice: 10 %).
POOR_REL_STD = 10.0


class ExcitationWarning(UserWarning):
    """The data leave some base-parameter directions (nearly) unexcited."""


@dataclass
class Bounds:
    """Optional constraints of the consistent fit (per body, by body name).

    mass : {body: (min kg, max kg)}; com : {body: ((xmin, ymin, zmin), (xmax, ymax, zmax))} m in
    the body frame; total_mass : kg, the sum of the identified bodies' masses.
    """

    mass: dict = field(default_factory=dict)
    com: dict = field(default_factory=dict)
    total_mass: float | None = None

    def empty(self) -> bool:
        return not self.mass and not self.com and self.total_mass is None

    def check(self, robot: Robot) -> None:
        """Validate names and numbers; one-line errors naming the body."""
        for kind, table in (("mass bound", self.mass), ("COM bound", self.com)):
            for body in table:
                if body not in robot.body_names:
                    raise IdentError(f"{kind}: '{body}' is not a body of {robot.name} (bodies: {', '.join(robot.body_names)})")
        for body, (lo, hi) in self.mass.items():
            if not (np.isfinite(lo) and np.isfinite(hi) and 0 <= lo <= hi):
                raise IdentError(f"mass bound of '{body}': need 0 <= min <= max, got ({lo}, {hi})")
        for body, (lo, hi) in self.com.items():
            lo, hi = np.asarray(lo, float), np.asarray(hi, float)
            if lo.shape != (3,) or hi.shape != (3,) or not np.all(np.isfinite(lo)) or not np.all(np.isfinite(hi)) or np.any(lo > hi):
                raise IdentError(f"COM bound of '{body}': need two triples with min <= max, got {lo.tolist()}, {hi.tolist()}")
        if self.total_mass is not None and not (np.isfinite(self.total_mass) and self.total_mass > 0):
            raise IdentError(f"total mass: must be a positive number of kg, got {self.total_mass}")


@dataclass
class FitResult:
    """The outcome of :func:`fit`.

    Attributes
    ----------
    robot, terms, base : model, joint-term codes and base-parameter set used.
    method : "ols", "wls" or "consistent".
    beta : (b,) base parameter estimates (for ``consistent``: the base parameters of `full`).
    cov : (b, b) covariance of the base parameters (for ``consistent``: that of the WLS estimate),
        by the method in `uncertainty`.
    full : (p,) a full parameter vector reproducing `beta` (regressor column order). For OLS and
        WLS: the realization closest to the prior (see :func:`realization`; it may be physically
        impossible: see `physical`); for ``consistent``: the constrained realization.
    sigma : (n,) per-joint noise standard deviation estimated from the residuals (N m): of the OLS
        fit for ``ols``, of the first WLS fit otherwise.
    residual_rms : (n,) RMS of the residual of this fit, per joint (N m or N).
    condition : condition number of the column-scaled base regressor.
    unexcited : descriptions of the base-parameter directions the data barely excite.
    samples, sources : amount and origin of the data.
    solver : details of the consistent fit (stage, status, time), empty otherwise.
    warnings : every warning raised on the way.
    term_choice : how the joint terms were chosen from the data when ``terms="auto"``
        (:class:`ident.estimation.selection.TermChoice`), else None.
    uncertainty : how `cov` was obtained: {"method": "blocks" | "classic", "formula", and for
        blocks "blocks" (count) and "block_seconds" (median duration)}.
    cov_classic : (b, b) the classic covariance s^2 (W^T W)^-1 of the same estimate, kept for
        comparison (the summary prints the median ratio of the two standard deviations).
    """

    robot: Robot
    terms: tuple[str, ...]
    base: BaseParameters
    method: str
    beta: np.ndarray
    cov: np.ndarray
    full: np.ndarray
    sigma: np.ndarray
    residual_rms: np.ndarray
    condition: float
    unexcited: list[str]
    samples: int
    sources: list[str]
    solver: dict = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    term_choice: object = None
    uncertainty: dict = field(default_factory=lambda: {"method": "classic"})
    cov_classic: np.ndarray | None = None

    @property
    def std_classic(self) -> np.ndarray:
        """(b,) standard deviations by the classic formula s^2 (W^T W)^-1 (for comparison)."""
        cov = self.cov if self.cov_classic is None else self.cov_classic
        return np.sqrt(np.maximum(np.diag(cov), 0.0))

    @property
    def names(self) -> list[str]:
        """(b,) base parameter names."""
        return list(self.base.names)

    @property
    def std(self) -> np.ndarray:
        """(b,) standard deviations of the base parameters."""
        return np.sqrt(np.maximum(np.diag(self.cov), 0.0))

    @property
    def rel_std(self) -> np.ndarray:
        """(b,) relative standard deviation in percent, 100 std / |beta| (inf where beta = 0)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.beta != 0, 100.0 * self.std / np.abs(self.beta), np.inf)

    @property
    def poorly_identified(self) -> np.ndarray:
        """(b,) bool: relative standard deviation above :data:`POOR_REL_STD` percent."""
        return self.rel_std > POOR_REL_STD

    @property
    def inertial(self) -> np.ndarray:
        """(n, 10) per-body parameters of the full realization."""
        return self.full[: 10 * self.robot.n].reshape(self.robot.n, 10)

    @property
    def joint_params(self) -> dict[str, np.ndarray]:
        """{term code: (n,) coefficients} of the full realization."""
        n, nt = self.robot.n, len(self.terms)
        t = self.full[10 * n :].reshape(n, nt) if nt else np.zeros((n, 0))
        return {c: t[:, k].copy() for k, c in enumerate(self.terms)}

    @property
    def min_eigenvalue(self) -> np.ndarray:
        """(n,) smallest eigenvalue of each body's pseudo-inertia (kg m^2; < 0 is impossible)."""
        return np.linalg.eigvalsh(pseudo_inertia(self.inertial))[:, 0]

    @property
    def physical(self) -> np.ndarray:
        """(n,) bool: each body of the full realization is physically realizable."""
        ev = np.linalg.eigvalsh(pseudo_inertia(self.inertial))
        return ev[:, 0] >= -PHYSICAL_TOL * np.maximum(np.abs(ev[:, -1]), 1e-300)

    def _combinations(self, E: np.ndarray) -> list[tuple[float, float | None]]:
        """Values and std of the linear functions e_k^T pi of the full parameters (columns of E,
        (p, k)): the std where the function is one of the base parameters (e_k = P^T a_k, so
        e_k^T pi = a_k^T beta), None where only this realization fixes it."""
        P = self.base.projection
        a, *_ = np.linalg.lstsq(P.T, E, rcond=None)
        miss = np.linalg.norm(P.T @ a - E, axis=0) / np.maximum(np.linalg.norm(E, axis=0), 1e-300)
        out = []
        for k in range(E.shape[1]):
            if miss[k] < 1e-8:
                var = float(a[:, k] @ self.cov @ a[:, k])
                out.append((float(a[:, k] @ self.beta), float(np.sqrt(max(var, 0.0))) if np.isfinite(var) else float("nan")))
            else:
                out.append((float(E[:, k] @ self.full), None))
        return out

    @property
    def link_masses(self) -> list[tuple[float, float | None]]:
        """Per body (mass kg, std kg or None): the std where the data determine the mass (it is a
        combination of the base parameters, m_i = a^T beta), None where only this realization
        fixes it (the mass is not a function of the base parameters)."""
        n = self.robot.n
        E = np.zeros((self.full.size, n))
        E[10 * np.arange(n), np.arange(n)] = 1.0
        return self._combinations(E)

    @property
    def dry_friction(self) -> list[tuple[tuple[float, float | None], tuple[float, float | None]]]:
        """Per joint ((level, std), (level, std)) of the dry friction at speed, moving in the positive
        and the negative direction (N m or N): the sum of the dry-friction terms once every
        low-speed shape has saturated (at :data:`LEVEL_SPEED`), i.e. the Coulomb level. This, not
        the individual shape coefficients, is the physical quantity when the model has several dry
        terms: with measured velocities the shapes share the step between them.
        std None where the data do not determine the level."""
        n, nt = self.robot.n, len(self.terms)
        dry = [k for k, c in enumerate(self.terms) if c in DRY_FRICTION_TERMS]
        v = np.array([[LEVEL_SPEED], [-LEVEL_SPEED]])
        cols = term_columns([self.terms[k] for k in dry], v, np.zeros_like(v))[:, 0, :]  # (2, d)
        E = np.zeros((self.full.size, 2 * n))
        for j in range(n):
            for t, k in enumerate(dry):
                E[10 * n + j * nt + k, 2 * j] = cols[0, t]
                E[10 * n + j * nt + k, 2 * j + 1] = -cols[1, t]
        vals = self._combinations(E)
        return [(vals[2 * j], vals[2 * j + 1]) for j in range(n)]

    def predict(self, q, dq, ddq) -> np.ndarray:
        """Model torque (N, n) of the full realization at (N, n) states."""
        from ..arm.regressor import predict

        return predict(self.robot, q, dq, ddq, self.full, self.terms)

    def diagnostics(self) -> dict:
        """Plain-type summary of the fit quality (goes into the parameter file)."""
        joints = self.robot.joint_names
        d = {
            "condition_number": float(self.condition),
            "residual_rms": {j: float(v) for j, v in zip(joints, self.residual_rms)},
            "noise_std": {j: float(v) for j, v in zip(joints, self.sigma)},
            "poorly_identified": [n for n, bad in zip(self.names, self.poorly_identified) if bad],
            "unexcited_directions": list(self.unexcited),
            "physical_links": {b: bool(ok) for b, ok in zip(self.robot.body_names, self.physical)},
            "warnings": list(self.warnings),
            "uncertainty": {k: v for k, v in self.uncertainty.items() if k != "cov"},
            "link_mass_std": {b: (None if s is None else float(s)) for b, (_, s) in zip(self.robot.body_names, self.link_masses)},
        }
        if any(c in DRY_FRICTION_TERMS for c in self.terms):
            d["dry_friction_at_speed"] = {j: {"positive": [float(p[0]), None if p[1] is None else float(p[1])],
                                              "negative": [float(m[0]), None if m[1] is None else float(m[1])]}
                                          for j, (p, m) in zip(joints, self.dry_friction)}
        if self.solver:
            d["solver"] = dict(self.solver)
        return d

    def to_parameter_set(self, data: dict | None = None) -> ParameterSet:
        """The :class:`ParameterSet` of this fit (full realization, base table, method, diagnostics)."""
        method = {"name": self.method, "terms": list(self.terms)}
        if self.term_choice is not None:
            method["term_choice"] = self.term_choice.describe()
        if self.method == "ols":
            method["realization"] = "closest to the prior (log-det metric) among those with the estimated base parameters; may be non-physical"
        elif self.method == "wls":
            method["realization"] = "closest to the prior (log-det metric) among those with the estimated base parameters; may be non-physical"
            method["weights"] = "per joint 1/sigma_j from OLS residuals"
        else:
            method["regularizer"] = "log-det divergence to the prior pseudo-inertias"
            method.update({k: v for k, v in self.solver.items() if k in ("stage", "solver", "regularization")})
        method["uncertainty"] = self.uncertainty_text()
        info = {"samples": int(self.samples), "sources": list(self.sources)}
        if data:
            info.update(data)
        table = BaseTable(self.names, self.beta, self.std, self.base.relations())
        return parameter_set_from_vector(self.robot, self.full, self.terms, base=table, method=method, data=info, diagnostics=self.diagnostics())

    def uncertainty_text(self) -> str:
        """One line: how the standard deviations were computed."""
        u = self.uncertainty
        if u.get("method") == "blocks":
            dur = f", median {u['block_seconds']:.3g} s each" if "block_seconds" in u else ""
            ratio = ""
            if self.cov_classic is not None:
                with np.errstate(divide="ignore", invalid="ignore"):
                    r = self.std / self.std_classic
                r = r[np.isfinite(r)]
                if r.size:
                    ratio = f"; median {np.median(r):.2g}x the classic formula's"
            return f"block jackknife over {u.get('blocks')} contiguous time blocks{dur} (counts correlated residuals and model error{ratio})"
        return "classic s^2 (W^T W)^-1 (assumes white, equal-variance residuals; too small on filtered closed-loop data)"

    def summary(self) -> str:
        """A text report: header with the diagnostics, then one row per base parameter."""
        from ..text import format_table

        r = self.robot
        lines = [
            (f"Fit of {r.name}: method {self.method}, {self.samples} samples from {len(self.sources)} log(s), "
             f"{self.base.n_base} base parameters (terms: {', '.join(self.terms) or 'none'})"),
            f"Condition number (column-scaled): {self.condition:.4g}",
            f"Standard deviations: {self.uncertainty_text()}",
        ]
        if self.term_choice is not None:
            lines.append(self.term_choice.describe())
        if self.solver:
            lines.append("Consistent fit: " + ", ".join(f"{k} {v}" for k, v in self.solver.items() if k in ("stage", "status", "seconds")))
            if self.solver.get("stage") == "trade-off":
                lines.append("  (the unconstrained estimate has no physical realization: the estimates are those of the "
                             "physical fit, the std those of the unconstrained WLS fit)")
            else:
                lines.append("  (the WLS estimate is physically realizable: kept exactly; the prior chose the realization)")
        lines.append(format_table(
            ["joint", "residual RMS", "noise std"],
            [[j, f"{a:.4g}", f"{s:.4g}"] for j, a, s in zip(r.joint_names, self.residual_rms, self.sigma)],
            "lrr",
        ))
        lines.append("")
        rows = []
        for name, b, s, rs, bad in zip(self.names, self.beta, self.std, self.rel_std, self.poorly_identified):
            rows.append([name, f"{b: .6g}", f"{s:.3g}", "inf" if not np.isfinite(rs) else f"{rs:.3g}", "poor" if bad else ""])
        lines.append(format_table(["parameter", "estimate", "std", "rel.std %", "flag"], rows, "lrrrl"))
        lines.append("")
        lines.append(format_table(
            ["link", "mass kg", "mass std", "COM x,y,z m", "physical"],
            [_link_row(b, pi, ok, ms) for b, pi, ok, ms in zip(r.body_names, self.inertial, self.physical, self.link_masses)],
            "lrrll",
        ))
        lines.append("  (mass std: where the data determine the link mass; 'one realization': the data fix only "
                     "combinations of it with other parameters, the value is the realization's)")
        if any(c in DRY_FRICTION_TERMS for c in self.terms):
            lines.append("")
            fmt = lambda x: "-" if x[1] is None else f"{x[1]:.3g}"
            lines.append(format_table(
                ["joint", "dry friction +", "std", "dry friction -", "std"],
                [[j, f"{p[0]:.5g}", fmt(p), f"{m[0]:.5g}", fmt(m)] for j, (p, m) in zip(r.joint_names, self.dry_friction)],
                "lrrrr",
            ))
            lines.append(f"  (dry friction at {LEVEL_SPEED:g} rad/s, every low-speed shape saturated: the Coulomb level in "
                         "each direction; with several dry terms this, not each coefficient, is the physical quantity)")
        if self.unexcited:
            lines.append("")
            lines.append("Directions the data barely excite (set by the prior in a consistent fit):")
            lines += [f"  {u}" for u in self.unexcited]
        if self.warnings:
            lines.append("")
            lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def _link_row(body, pi, ok, mass_std):
    if pi[0] > 0:
        _, c, _ = from_vector(pi)
        com = ", ".join(f"{x:.4g}" for x in c)
    else:
        com = "(undefined: mass <= 0)"
    std = "one realization" if mass_std[1] is None else f"{mass_std[1]:.3g}"
    return [body, f"{pi[0]:.4g}", std, com, "yes" if ok else "NO"]
