"""Estimators: ordinary and weighted least squares, and the physically consistent fit.

All three work on the compressed problem of :mod:`ident.estimation.compress` (per-joint triangles of
``[Y_b | tau]``), so they cost the same whatever the number of samples.

* ``ols``: beta = argmin ||Y_b beta - tau||^2; classic covariance sigma^2 (Y_b^T Y_b)^-1 with
  sigma^2 = RSS / (rows - b).
* ``wls``: each joint's rows are weighted by 1/sigma_j, sigma_j estimated from that joint's OLS
  residuals (Gautier 1997), then once more from the first WLS fit's residuals (the OLS residual
  of a quiet joint is inflated by the noisier joints); classic covariance s^2 (W^T W)^-1 of the
  weighted problem (s^2 ~ 1).
* Standard deviations: by default (``uncertainty="blocks"``) the delete-one-block jackknife of the
  OLS or WLS estimate over contiguous time blocks (:mod:`ident.estimation.uncertainty`); the
  classic formula assumes white residuals and is several times too small on filtered closed-loop
  data. ``uncertainty="classic"`` keeps it (and ``FitResult.cov_classic`` always holds it).
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
:class:`ident.arm.parameters.ParameterSet`.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..arm.base import BaseParameters
from ..arm.model import Robot
from ..arm.parameters import ParameterSet
from ..blas import single_thread_blas
from ..errors import IdentError, NumericalError
from .compress import Compressor, compress
from .consistent import consistent_fit, realization
from .least_squares import solve_reduced, unexcited_directions
from .result import METHODS, Bounds, ExcitationWarning, FitResult
from .selection import choose_terms
from .uncertainty import UNCERTAINTY, block_jackknife, compressor_grams

#: Default weight of the log-det regulariser in the trade-off stage (chi-square units): like a
#: prior that trusts each link's description values to about 100 % (common practice for CAD
#: values is tens of percent; see the module docstring).
REGULARIZATION = 1.0


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


def fit(robot: Robot, data, method: str = "consistent", terms="auto", *, bounds: Bounds | None = None, prior=None,
        regularization: float = REGULARIZATION, solver: str = "CLARABEL", progress=None, base: BaseParameters | None = None,
        slow_velocity: float | None = None, uncertainty: str = "blocks") -> FitResult:
    """Identify the base parameters (and a full realization) of `robot` from logged data.

    Parameters
    ----------
    robot : the model.
    data : a data set from :func:`ident.data.load.load_dataset`, a tuple ``(q, dq, ddq, tau)`` of
        (N, n) arrays in SI units (rad, rad/s, rad/s^2, N m; m and N for prismatic joints), or a
        list of those (several logs are combined).
    method : "ols", "wls" or "consistent" (the default; see the module docstring).
    terms : joint terms (codes fv, fc, fo, ia, fcp, fcn, fl1..fl3, or groups, see
        :func:`ident.parse_terms`); ``"auto"`` (the default) chooses the friction model from the
        data by held-out prediction across blocks (:func:`ident.estimation.selection.choose_terms`),
        recorded in ``FitResult.term_choice``.
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
    uncertainty : how the standard deviations are computed: "blocks" (the default: delete-one
        jackknife over contiguous time blocks, :mod:`ident.estimation.uncertainty`; honest on
        filtered, closed-loop data) or "classic" (s^2 (W^T W)^-1, which assumes white residuals).

    Returns
    -------
    FitResult
    """
    _check_method(method)
    _check_uncertainty(uncertainty)
    choice = None
    if isinstance(terms, str) and terms.strip().lower() == "auto":
        choice = choose_terms(robot, data)
        terms = choice.terms
    comp = compress(robot, data, terms, base=base, progress=progress, slow_velocity=slow_velocity,
                    keep_blocks=(uncertainty == "blocks"))
    result = fit_compressed(comp, method, bounds=bounds, prior=prior, regularization=regularization, solver=solver,
                            uncertainty=uncertainty)
    result.term_choice = choice
    return result


def _check_method(method: str) -> None:
    if method not in METHODS:
        raise IdentError(f"method: '{method}' is not one of {', '.join(METHODS)}")


def _check_uncertainty(uncertainty: str) -> None:
    if uncertainty not in UNCERTAINTY:
        raise IdentError(f"uncertainty: '{uncertainty}' is not one of {', '.join(UNCERTAINTY)}")


def fit_compressed(comp: Compressor, method: str = "consistent", *, bounds: Bounds | None = None, prior=None,
                   regularization: float = REGULARIZATION, solver: str = "CLARABEL", uncertainty: str = "blocks") -> FitResult:
    """:func:`fit` on data already compressed into a :class:`ident.estimation.compress.Compressor`."""
    # The matrices here are a few dozen wide: BLAS threads only cost synchronisation.
    with single_thread_blas():
        return _fit_compressed(comp, method, bounds, prior, regularization, solver, uncertainty)


def _fit_compressed(comp: Compressor, method: str, bounds, prior, regularization: float, solver: str,
                    uncertainty: str = "blocks") -> FitResult:
    _check_method(method)
    _check_uncertainty(uncertainty)
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

    ls = solve_reduced(comp.reduce(), names, allow_deficient=(method == "consistent"))
    sigma = _joint_sigma(comp, ls.beta)
    unexcited = unexcited_directions(ls, names)
    if unexcited:
        msg = f"{len(unexcited)} base-parameter direction(s) barely excited by the data: " + "; ".join(unexcited)
        msgs.append(msg)
        warnings.warn(msg, ExcitationWarning, stacklevel=2)
    result = ls
    weights = None
    if method in ("wls", "consistent"):
        # One refinement: sigma_j from the OLS residuals is inflated on a quiet joint by the
        # error the noisy joints put into the shared parameters; the WLS residuals fix that.
        result = solve_reduced(comp.reduce(_weights(comp, sigma)), names, allow_deficient=(method == "consistent"))
        sigma = _joint_sigma(comp, result.beta)
        weights = _weights(comp, sigma)
        result = solve_reduced(comp.reduce(weights), names, allow_deficient=(method == "consistent"))
    unc = _uncertainty(comp, result, weights, uncertainty, msgs)
    P = bp.projection
    solver_info: dict = {}
    if method == "consistent":
        red_w = comp.reduce(_weights(comp, sigma))
        full, solver_info = consistent_fit(robot, comp.terms, P, red_w, result, prior_full, bounds, regularization, solver)
        if solver_info.get("status") == "optimal_inaccurate":
            msgs.append(f"consistent fit: solver {solver} reports an inaccurate optimum (check the bounds and the data)")
        beta = P @ full
    else:
        beta = result.beta
        full = realization(robot, P, beta, prior_full)
    if result.rank_deficient:
        msgs.append("the data are rank deficient: no covariance; the consistent fit's prior decides the unexcited directions")
    rms = np.sqrt(comp.joint_rss(beta) / np.maximum(comp.rows, 1))
    res = FitResult(
        robot=robot, terms=comp.terms, base=bp, method=method, beta=beta, cov=unc.pop("cov"), full=full, sigma=sigma,
        residual_rms=rms, condition=ls.condition, unexcited=unexcited, samples=comp.samples,
        sources=list(comp.sources), solver=solver_info, warnings=msgs, uncertainty=unc, cov_classic=result.cov,
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


def _uncertainty(comp: Compressor, result, weights, uncertainty: str, msgs: list[str]) -> dict:
    """Covariance of the (unconstrained, OLS or WLS) estimate and how it was obtained: {"cov", "method", ...}."""
    classic = {"cov": result.cov, "method": "classic", "formula": "s^2 (W^T W)^-1 (white residuals assumed)"}
    if uncertainty == "classic" or result.rank_deficient:
        return classic
    if comp.blocks is None:
        msgs.append("no time blocks were kept with the compressed data: classic standard deviations (likely too small)")
        return classic
    cov, why = block_jackknife(compressor_grams(comp, weights), result.beta)
    if cov is None:
        msgs.append(f"block jackknife not possible ({why}): classic standard deviations (likely too small)")
        return classic
    secs = np.array(comp.blocks.seconds, float)
    out = {"cov": cov, "method": "blocks", "formula": "delete-one-block jackknife (Kunsch 1989)", "blocks": len(comp.blocks)}
    if np.all(np.isfinite(secs)):
        out["block_seconds"] = round(float(np.median(secs)), 6)
    return out


def _prior_vector(robot: Robot, terms, prior) -> np.ndarray:
    nt = len(terms)
    if prior is None:
        inertial = robot.prior
    elif isinstance(prior, ParameterSet):
        inertial = prior.check_robot(robot, where="prior").inertial
    else:
        inertial = robot.check_inertial(prior)
    return np.concatenate([np.asarray(inertial, float).reshape(-1), np.zeros(robot.n * nt)])


__all__ = ["fit", "fit_compressed"]
