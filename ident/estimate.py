"""Estimators: ordinary and weighted least squares, and the physically consistent fit.

All three work on the compressed problem of :mod:`ident.compress` (per-joint triangles of
``[Y_b | tau]``), so they cost the same whatever the number of samples.

* ``ols``: beta = argmin ||Y_b beta - tau||^2, covariance sigma^2 (Y_b^T Y_b)^-1 with
  sigma^2 = RSS / (rows - b).
* ``wls``: each joint's rows are weighted by 1/sigma_j, sigma_j estimated from that joint's OLS
  residuals (Gautier 1997), then once more from the first WLS fit's residuals (the OLS residual
  of a quiet joint is inflated by the noisier joints); covariance s^2 (W^T W)^-1 of the weighted
  problem (s^2 ~ 1).
* ``consistent``: full per-body parameters whose 4x4 pseudo-inertias are positive semidefinite
  (Wensing, Kim and Slotine 2017), friction and armature coefficients >= 0, optional mass, COM
  and total-mass bounds; solved with cvxpy (Clarabel by default) on the WLS-weighted compressed
  data. The regulariser is the log-det (Bregman) divergence between each body's pseudo-inertia
  and the prior's, d(J, J0) = -log det J + tr(J0^-1 J) + const (Lee, Wensing and Park 2020); it is
  convex, keeps every pseudo-inertia strictly positive definite, and is invariant to the choice
  of link frame. How it only decides what the data cannot see:

  1. *Exact stage*: minimise sum_i d(J_i, J0_i) subject to the constraints and to
     ``P pi = beta_wls`` (the base parameters equal the unconstrained estimate). If this is
     feasible, the WLS estimate is also the constrained least-squares optimum, and the regulariser
     picks the realization among all with those base parameters: it decides the unidentifiable
     directions only.
  2. *Trade-off stage* (when the WLS estimate is not realizable, or the data are rank deficient):
     minimise ||W (Y_b P pi - tau)||^2 / s^2 + gamma sum_i d(J_i, J0_i). In these chi-square units
     the data term grows with the number of samples while the regulariser does not: near the
     prior, d is about half the squared relative change of the pseudo-inertia, so gamma = 1 (the
     default) acts like a prior that trusts the description to about 100 %. A well-identified base
     parameter (standard deviation far below its size) does not feel it; directions the data
     barely see are set by the prior. Joint terms have no prior; a ridge a million times weaker
     still keeps a term the data never see (a joint that does not move) near zero.

  The fit returns the full per-body realization (mass, COM, inertia at COM) and its base
  parameters ``P pi``. Its reported covariance is the WLS covariance (the constraints only
  shrink the feasible set, so this is a conservative statement of the uncertainty).

The prior is the robot description's inertial values (URDF ``<inertial>`` or the DH file's link
priors), or a parameter file passed as ``prior``. OLS and WLS also return a full realization:
the one closest to the prior in the quadratic approximation of the same divergence among all
with the estimated base parameters (:func:`realization`); it may be physically impossible.

The result object :class:`FitResult` prints a statsmodels-style table and turns into a
:class:`ident.paramfile.ParameterSet`.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from .base import BaseParameters
from .compress import Compressor, Reduced, compress, single_thread_blas
from .errors import IdentError, NumericalError
from .model import Robot
from .paramfile import BaseTable, ParameterSet, parameter_set_from_vector
from .spatial import from_pseudo_inertia, from_vector, pseudo_inertia

METHODS = ("ols", "wls", "consistent")
#: Default joint terms (the CLI's default too).
DEFAULT_TERMS = ("fv", "fc", "ia")
#: Relative standard deviation (%) above which a base parameter is flagged (common practice: 10 %).
POOR_REL_STD = 10.0
#: Scaled singular values below this fraction of the largest make the data rank deficient.
RANK_TOL = 1e-10
#: Scaled singular values below this fraction of the largest are reported as unexcited directions.
UNEXCITED_TOL = 1e-4
#: Default weight of the log-det regulariser in the trade-off stage (chi-square units): like a
#: prior that trusts each link's description values to about 100 % (common practice for CAD
#: values is tens of percent; see the module docstring).
REGULARIZATION = 1.0
#: Pseudo-inertias with smallest eigenvalue below -PHYSICAL_TOL x largest are physically impossible.
PHYSICAL_TOL = 1e-9
_NONNEG_TERMS = ("fv", "fc", "ia")


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
    cov : (b, b) covariance of the base parameters (for ``consistent``: the WLS covariance).
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

    def predict(self, q, dq, ddq) -> np.ndarray:
        """Model torque (N, n) of the full realization at (N, n) states."""
        from .regressor import predict

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
        }
        if self.solver:
            d["solver"] = dict(self.solver)
        return d

    def to_parameter_set(self, data: dict | None = None) -> ParameterSet:
        """The :class:`ParameterSet` of this fit (full realization, base table, method, diagnostics)."""
        method = {"name": self.method, "terms": list(self.terms)}
        if self.method == "ols":
            method["realization"] = "closest to the prior (log-det metric) among those with the estimated base parameters; may be non-physical"
        elif self.method == "wls":
            method["realization"] = "closest to the prior (log-det metric) among those with the estimated base parameters; may be non-physical"
            method["weights"] = "per joint 1/sigma_j from OLS residuals"
        else:
            method["regularizer"] = "log-det divergence to the prior pseudo-inertias"
            method.update({k: v for k, v in self.solver.items() if k in ("stage", "solver", "regularization")})
        info = {"samples": int(self.samples), "sources": list(self.sources)}
        if data:
            info.update(data)
        table = BaseTable(self.names, self.beta, self.std, self.base.relations())
        return parameter_set_from_vector(self.robot, self.full, self.terms, base=table, method=method, data=info, diagnostics=self.diagnostics())

    def summary(self) -> str:
        """A text report: header with the diagnostics, then one row per base parameter."""
        from .commands.common import format_table

        r = self.robot
        lines = [
            f"Fit of {r.name}: method {self.method}, {self.samples} samples from {len(self.sources)} log(s), "
            f"{self.base.n_base} base parameters (terms: {', '.join(self.terms) or 'none'})",
            f"Condition number (column-scaled): {self.condition:.4g}",
        ]
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
            ["link", "mass kg", "COM x,y,z m", "physical"],
            [_link_row(b, pi, ok) for b, pi, ok in zip(r.body_names, self.inertial, self.physical)],
            "lrll",
        ))
        if self.unexcited:
            lines.append("")
            lines.append("Directions the data barely excite (set by the prior in a consistent fit):")
            lines += [f"  {u}" for u in self.unexcited]
        if self.warnings:
            lines.append("")
            lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def _link_row(body, pi, ok):
    if pi[0] > 0:
        _, c, _ = from_vector(pi)
        com = ", ".join(f"{x:.4g}" for x in c)
    else:
        com = "(undefined: mass <= 0)"
    return [body, f"{pi[0]:.4g}", com, "yes" if ok else "NO"]


# ----------------------------------------------------------------------------------------------
# least squares on the reduced problem


@dataclass
class _LS:
    beta: np.ndarray
    cov: np.ndarray
    condition: float
    singular: np.ndarray  # scaled singular values
    Vt: np.ndarray  # scaled right singular vectors (rows)
    scale: np.ndarray  # column norms
    rank_deficient: bool


def _solve(red: Reduced, names: list[str], allow_deficient: bool = False) -> _LS:
    """Least squares on ``min ||R beta - z||^2``: estimate, covariance and conditioning."""
    R, z = red.R, red.z
    b = R.shape[0]
    scale = np.linalg.norm(R, axis=0)
    dead = np.flatnonzero(scale == 0)
    safe = np.where(scale > 0, scale, 1.0)
    U, s, Vt = np.linalg.svd(R / safe, full_matrices=False)
    cond = float(s[0] / s[-1]) if s[-1] > 0 else float("inf")
    deficient = dead.size > 0 or s[-1] < RANK_TOL * s[0]
    dof = red.rows - b
    if dof <= 0:
        raise NumericalError(f"not enough data: {red.rows} equations for {b} base parameters")
    if deficient:
        if not allow_deficient:
            what = [names[k] for k in dead] if dead.size else _direction(Vt[-1], safe, names)
            raise NumericalError(
                f"the data do not determine every base parameter (scaled condition number {cond:.3g}); "
                f"unexcited: {what if isinstance(what, str) else ', '.join(what)}; move the joints more or use method 'consistent'"
            )
        keep = s > RANK_TOL * s[0]
        beta = (Vt[keep].T @ ((U[:, keep].T @ z) / s[keep])) / safe
        r = R @ beta - z
        sigma2 = (r @ r + red.rho**2) / dof
        cov = np.full((b, b), np.nan)
        return _LS(beta, cov, cond, s, Vt, safe, True)
    beta = scipy.linalg.solve_triangular(R, z, check_finite=False)
    Rinv = scipy.linalg.solve_triangular(R, np.eye(b), check_finite=False)
    sigma2 = red.rho**2 / dof
    cov = sigma2 * (Rinv @ Rinv.T)
    return _LS(beta, cov, cond, s, Vt, safe, False)


def _direction(v_scaled: np.ndarray, scale: np.ndarray, names: list[str], top: int = 4) -> str:
    """Readable direction in base-parameter space, e.g. ``0.71 link7.xxR - 0.70 link7.yy``."""
    v = v_scaled / scale
    v = v / np.abs(v).max()
    idx = np.argsort(-np.abs(v))[:top]
    terms = [f"{'-' if v[k] < 0 else '+'} {abs(v[k]):.2g} {names[k]}" for k in idx if abs(v[k]) > 1e-3]
    text = " ".join(terms)
    return text[2:] if text.startswith("+ ") else text


def _unexcited(ls: _LS, names: list[str]) -> list[str]:
    out = []
    for k in np.flatnonzero(ls.singular < UNEXCITED_TOL * ls.singular[0]):
        out.append(f"{_direction(ls.Vt[k], ls.scale, names)} (relative singular value {ls.singular[k] / ls.singular[0]:.2g})")
    return out


def _joint_sigma(comp: Compressor, beta: np.ndarray) -> np.ndarray:
    """Per-joint noise std from residuals, each joint charged its share of the b parameters."""
    b = comp.n_base
    rows = comp.rows.astype(float)
    dof = rows - b * rows / rows.sum()
    if np.any(dof <= 0):
        raise NumericalError(f"not enough data: {int(rows.min())} equations for joint {comp.robot.joint_names[int(np.argmin(rows))]} and {b} base parameters")
    return np.sqrt(comp.joint_rss(beta) / dof)


def _weights(comp: Compressor, sigma: np.ndarray) -> np.ndarray:
    # Floor: a joint whose residual is exactly zero (noiseless data) would get an infinite weight.
    rms_tau = np.sqrt(comp.sum_tau2 / np.maximum(comp.rows, 1))
    floor = 1e-12 * np.maximum(rms_tau, 1e-300)
    return 1.0 / np.maximum(sigma, floor)


# ----------------------------------------------------------------------------------------------
# public entry points


def fit(robot: Robot, data, method: str = "consistent", terms=DEFAULT_TERMS, *, bounds: Bounds | None = None, prior=None,
        regularization: float = REGULARIZATION, solver: str = "CLARABEL", progress=None, base: BaseParameters | None = None,
        slow_velocity: float | None = None) -> FitResult:
    """Identify the base parameters (and a full realization) of `robot` from logged data.

    Parameters
    ----------
    robot : the model.
    data : a data set from :func:`ident.logs.load_dataset`, a tuple ``(q, dq, ddq, tau)`` of
        (N, n) arrays in SI units (rad, rad/s, rad/s^2, N m; m and N for prismatic joints), or a
        list of those (several logs are combined).
    method : "ols", "wls" or "consistent" (the default; see the module docstring).
    terms : joint terms (codes fv, fc, fo, ia).
    bounds : optional :class:`Bounds` (consistent fit only).
    prior : prior inertial parameters (n, 10) or a :class:`ParameterSet` (default: the robot
        description's values), used by the consistent fit's regulariser and the OLS realization.
    regularization : weight of the log-det regulariser in the trade-off stage.
    solver : cvxpy solver name for the consistent fit.
    progress : optional callable ``progress(samples_done, samples_total)``.
    base : base-parameter set (default: computed for robot and terms).
    slow_velocity : with the Coulomb term, joint equations at samples where that joint's |q'| is
        below this (rad/s or m/s) are left out, because sign(q') is unreliable there. Data sets
        carry their own flags (``Segment.slow``, set when the logs are loaded); for arrays, give
        a threshold here (default: keep every sample).

    Returns
    -------
    FitResult
    """
    _check_method(method)
    comp = compress(robot, data, terms, base=base, progress=progress, slow_velocity=slow_velocity)
    return fit_compressed(comp, method, bounds=bounds, prior=prior, regularization=regularization, solver=solver)


def _check_method(method: str) -> None:
    if method not in METHODS:
        raise IdentError(f"method: '{method}' is not one of {', '.join(METHODS)}")


def fit_compressed(comp: Compressor, method: str = "consistent", *, bounds: Bounds | None = None, prior=None,
                   regularization: float = REGULARIZATION, solver: str = "CLARABEL") -> FitResult:
    """:func:`fit` on data already compressed into a :class:`ident.compress.Compressor`."""
    # The matrices here are a few dozen wide: BLAS threads only cost synchronisation.
    with single_thread_blas():
        return _fit_compressed(comp, method, bounds, prior, regularization, solver)


def _fit_compressed(comp: Compressor, method: str, bounds, prior, regularization: float, solver: str) -> FitResult:
    _check_method(method)
    robot, bp = comp.robot, comp.base
    bounds = bounds or Bounds()
    if not bounds.empty() and method != "consistent":
        raise IdentError("mass, COM and total-mass bounds need method 'consistent'")
    bounds.check(robot)
    if not (np.isfinite(regularization) and regularization > 0):
        raise IdentError(f"regularization: must be a positive number, got {regularization}")
    prior_full = _prior_vector(robot, comp.terms, prior)
    names = list(bp.names)
    msgs: list[str] = []

    ls = _solve(comp.reduce(), names, allow_deficient=(method == "consistent"))
    sigma = _joint_sigma(comp, ls.beta)
    unexcited = _unexcited(ls, names)
    if unexcited:
        msg = f"{len(unexcited)} base-parameter direction(s) barely excited by the data: " + "; ".join(unexcited)
        msgs.append(msg)
        warnings.warn(msg, ExcitationWarning, stacklevel=2)
    result = ls
    if method in ("wls", "consistent"):
        # One refinement: sigma_j from the OLS residuals is inflated on a quiet joint by the
        # error the noisy joints put into the shared parameters; the WLS residuals fix that.
        result = _solve(comp.reduce(_weights(comp, sigma)), names, allow_deficient=(method == "consistent"))
        sigma = _joint_sigma(comp, result.beta)
        result = _solve(comp.reduce(_weights(comp, sigma)), names, allow_deficient=(method == "consistent"))
    P = bp.projection
    solver_info: dict = {}
    if method == "consistent":
        red_w = comp.reduce(_weights(comp, sigma))
        full, solver_info = _consistent(robot, comp.terms, P, red_w, result, prior_full, bounds, regularization, solver)
        if solver_info.get("status") == "optimal_inaccurate":
            msgs.append(f"consistent fit: solver {solver} reports an inaccurate optimum (check the bounds and the data)")
        beta = P @ full
        cov = result.cov
    else:
        beta = result.beta
        cov = result.cov
        full = realization(robot, P, beta, prior_full)
    if result.rank_deficient:
        msgs.append("the data are rank deficient: no covariance; the consistent fit's prior decides the unexcited directions")
    rms = np.sqrt(comp.joint_rss(beta) / np.maximum(comp.rows, 1))
    res = FitResult(
        robot=robot, terms=comp.terms, base=bp, method=method, beta=beta, cov=cov, full=full, sigma=sigma,
        residual_rms=rms, condition=ls.condition, unexcited=unexcited, samples=comp.samples,
        sources=list(comp.sources), solver=solver_info, warnings=msgs,
    )
    bad = [b for b, ok in zip(robot.body_names, res.physical) if not ok]
    if bad and method == "consistent":
        # An inaccurate solver optimum can break the LMIs; a "consistent" result must never be impossible.
        raise NumericalError(
            f"consistent fit: solver {solver} ended with status '{solver_info.get('status')}' and left link(s) {', '.join(bad)} "
            f"physically impossible (smallest pseudo-inertia eigenvalue {res.min_eigenvalue.min():.3g}); "
            "check the bounds (mass, COM, total mass) against the data"
        )
    if bad:
        res.warnings.append(f"physically impossible link(s) in the realization: {', '.join(bad)} (pseudo-inertia not positive semidefinite; use method 'consistent')")
    return res


def _prior_vector(robot: Robot, terms, prior) -> np.ndarray:
    nt = len(terms)
    if prior is None:
        inertial = robot.prior
    elif isinstance(prior, ParameterSet):
        inertial = prior.check_robot(robot, where="prior").inertial
    else:
        inertial = robot.check_inertial(prior)
    return np.concatenate([np.asarray(inertial, float).reshape(-1), np.zeros(robot.n * nt)])


# ----------------------------------------------------------------------------------------------
# the physically consistent fit


def divergence_metric(J0: np.ndarray) -> np.ndarray:
    """(10, 10) Hessian, in the 10 parameters, of the log-det divergence d(J, J0) at J = J0:
    H_kl = tr(J0^-1 A_k J0^-1 A_l) with A_k the pseudo-inertia of the k-th unit vector."""
    Ji = np.linalg.inv(J0)
    A = pseudo_inertia(np.eye(10))  # (10, 4, 4), pseudo_inertia is linear
    B = Ji @ A
    return np.einsum("kij,lji->kl", B, B)


def realization(robot: Robot, P: np.ndarray, beta: np.ndarray, prior_full: np.ndarray) -> np.ndarray:
    """Full parameters (p,) with base parameters ``P x = beta`` closest to the prior in the
    quadratic approximation of the consistent fit's log-det divergence (each body measured in
    the metric of its prior pseudo-inertia); joint terms, which have no prior, take up what the
    inertial parameters need not (a weight 1e-6 of the inertial ones). Physical realizability is
    not enforced: that is the consistent fit's job."""
    n, p = robot.n, P.shape[1]
    J0 = _regularized_prior(pseudo_inertia(prior_full[: 10 * n].reshape(n, 10)))
    H = np.zeros((p, p))
    for i in range(n):
        H[10 * i : 10 * i + 10, 10 * i : 10 * i + 10] = divergence_metric(J0[i])
    d = np.diag(H)[: 10 * n]
    k = np.arange(10 * n, p)
    H[k, k] = 1e-6 * d.mean()
    # min (x - x0)^T H (x - x0) s.t. P x = beta  ->  x = x0 + H^-1 P^T (P H^-1 P^T)^-1 (beta - P x0)
    Hi_Pt = np.linalg.solve(H, P.T)
    lam = np.linalg.solve(P @ Hi_Pt, beta - P @ prior_full)
    x = prior_full + Hi_Pt @ lam
    x += np.linalg.lstsq(P, beta - P @ x, rcond=None)[0]  # remove rounding in P x = beta
    return x


def _regularized_prior(J0: np.ndarray) -> np.ndarray:
    """Make each prior pseudo-inertia positive definite (massless or degenerate bodies in a
    description would make the log-det divergence undefined): lift its spectrum to at least
    1e-4 of its trace, with a floor of 1e-6 for a body that has no mass at all."""
    out = np.empty_like(J0)
    for i, J in enumerate(J0):
        ev, V = np.linalg.eigh(0.5 * (J + J.T))
        floor = max(1e-4 * max(ev.sum(), 0.0), 1e-6)
        out[i] = (V * np.maximum(ev, floor)) @ V.T
    return out


def _sqrtm(J: np.ndarray) -> np.ndarray:
    ev, V = np.linalg.eigh(J)
    return (V * np.sqrt(ev)) @ V.T


def _consistent(robot, terms, P, red_w: Reduced, wls: _LS, prior_full, bounds: Bounds, gamma: float, solver: str):
    wls_full = realization(robot, P, wls.beta, prior_full)
    import cvxpy as cp

    n, nt = robot.n, len(terms)
    b = P.shape[0]
    J0 = _regularized_prior(pseudo_inertia(prior_full[: 10 * n].reshape(n, 10)))
    # Preconditioning: each pseudo-inertia is J_i = J0_i^(1/2) X_i J0_i^(1/2), so the decision
    # variables X_i are O(1) (the prior is X_i = I) whatever the link's size, and the divergence
    # d(J_i, J0_i) = -log det X_i + tr X_i + const. Joint terms are scaled by their data columns.
    roots = [_sqrtm(J) for J in J0]
    Xs = [cp.Variable((4, 4), PSD=True) for _ in range(n)]
    # One constant matrix maps every X entry to the full parameters (cheap to canonicalize):
    # column 16 i + 4 l + k of M is the 10-vector of J_i = root_i E_kl root_i (vec order F).
    nz = 16 * n + n * nt
    M = np.zeros((10 * n + n * nt, nz))
    E = np.zeros((16, 4, 4))
    E[np.arange(16), np.arange(16) % 4, np.arange(16) // 4] = 1.0
    for i, r in enumerate(roots):
        M[10 * i : 10 * i + 10, 16 * i : 16 * i + 16] = from_pseudo_inertia(r @ E @ r).T
    parts = [cp.vec(X, order="F") for X in Xs]
    if nt:
        # Joint terms in units of the unconstrained estimate's magnitudes, so u is O(1).
        t_ls = np.abs(wls_full[10 * n :])
        tscale = np.maximum(t_ls, 1e-2 * t_ls.max()) if t_ls.max() > 0 else np.ones(n * nt)
        u = cp.Variable(n * nt)
        M[10 * n :, 16 * n :] = np.diag(tscale)
        parts.append(u)
    z = cp.hstack(parts)
    x = M @ z
    cons = []
    if nt:
        for k, code in enumerate(terms):
            if code in _NONNEG_TERMS:
                cons.append(u[k::nt] >= 0)
    for body, (lo, hi) in bounds.mass.items():
        i = robot.body_names.index(body)
        cons += [x[10 * i] >= lo, x[10 * i] <= hi]
    for body, (lo, hi) in bounds.com.items():
        i = robot.body_names.index(body)
        m, h = x[10 * i], x[10 * i + 1 : 10 * i + 4]
        cons += [h >= m * np.asarray(lo, float), h <= m * np.asarray(hi, float)]
    if bounds.total_mass is not None:
        cons.append(cp.sum(x[0 : 10 * n : 10]) == bounds.total_mass)
    div = sum(-cp.log_det(X) + cp.trace(X) for X in Xs)
    info = {"solver": solver, "regularization": gamma}
    t0 = time.perf_counter()
    full = None
    if not wls.rank_deficient:
        # Equality rows scaled to O(1) so the solver's feasibility tolerance is relative.
        rs = 1.0 / np.maximum(np.abs(P).max(axis=1) * np.maximum(np.abs(wls.beta), 1e-3), 1e-12)
        prob = cp.Problem(cp.Minimize(div), cons + [((rs[:, None] * P) @ M) @ z == rs * wls.beta])
        status = _solve_problem(prob, solver)
        if status in ("optimal", "optimal_inaccurate") and z.value is not None:
            full = _polish(M @ np.asarray(z.value, float), P, wls.beta, n)
            info.update(stage="exact", status=status)
    if full is None:
        dof = max(red_w.rows - b, 1)
        s2 = red_w.rho**2 / dof
        # Floor: noiseless data would make the data term's curvature unbounded and the SDP
        # numerically hopeless; a noise level of 1e-4 of the (weighted) RMS torque is far below
        # any real sensor.
        s2 = max(s2, 1e-8 * (float(red_w.z @ red_w.z) + red_w.rho**2) / red_w.rows)
        obj = cp.sum_squares(((red_w.R @ P @ M) / np.sqrt(s2)) @ z - red_w.z / np.sqrt(s2)) + gamma * div
        if nt:
            # Joint terms have no prior: a ridge far weaker than any data (u is in units of the
            # unconstrained estimate) only keeps a completely unseen term bounded; a stronger one
            # would bias friction that slow motion sees weakly.
            obj = obj + 1e-6 * gamma * cp.sum_squares(u)
        prob = cp.Problem(cp.Minimize(obj), cons)
        status = _solve_problem(prob, solver)
        if status not in ("optimal", "optimal_inaccurate") or z.value is None:
            raise NumericalError(f"consistent fit: solver {solver} ended with status '{status}' (check the bounds: they may be infeasible)")
        full = M @ np.asarray(z.value, float)
        info.update(stage="trade-off", status=status)
    info["seconds"] = round(time.perf_counter() - t0, 3)
    if info["status"] == "optimal_inaccurate":
        warnings.warn(f"consistent fit: solver {solver} reports an inaccurate optimum (check the bounds and the data)", RuntimeWarning, stacklevel=3)
    return full, info


def _solve_problem(prob, solver: str) -> str:
    import cvxpy as cp

    try:
        with warnings.catch_warnings():
            # cvxpy warns about inaccurate solutions; the status is checked by the caller.
            warnings.simplefilter("ignore", UserWarning)
            prob.solve(solver=solver, ignore_dpp=True)  # no cvxpy Parameters: skip DPP analysis
    except cp.error.SolverError as exc:
        if "not installed" in str(exc) or "not recognized" in str(exc).lower():
            raise IdentError(f"solver: {exc}") from None
        return "solver_error"
    except ValueError as exc:
        raise IdentError(f"solver: {exc}") from None
    return prob.status


def _polish(x: np.ndarray, P: np.ndarray, beta: np.ndarray, n: int) -> np.ndarray:
    """Remove the solver's tiny equality residual (minimum-norm step) if it keeps every body
    physical, so the exact stage reproduces the WLS base parameters to rounding error."""
    step = np.linalg.lstsq(P, beta - P @ x, rcond=None)[0]
    y = x + step
    ev = np.linalg.eigvalsh(pseudo_inertia(y[: 10 * n].reshape(n, 10)))
    ok = np.all(ev[:, 0] >= -PHYSICAL_TOL * np.abs(ev[:, -1]))
    return y if ok else x


__all__ = ["Bounds", "ExcitationWarning", "FitResult", "fit", "fit_compressed", "METHODS", "DEFAULT_TERMS"]
