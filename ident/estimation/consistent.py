"""The physically consistent fit: a small SDP on the compressed problem (cvxpy, Clarabel).

Pseudo-inertias positive semidefinite (Wensing, Kim and Slotine 2017), viscous, armature and
Coulomb levels non-negative, friction dissipative at every speed of a velocity grid (f(v) v >= 0),
optional mass, COM and total-mass bounds; the log-det divergence to the prior's pseudo-inertias
(Lee, Wensing and Park 2020) decides the directions the data cannot see (see
:mod:`ident.estimation.estimate` for the two stages). Also the closest realization of given base
parameters for the unconstrained estimators.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from ..arm.model import DRY_FRICTION_TERMS, LOW_SPEED_SCALES, Robot
from ..arm.parameters import PHYSICAL_TOL
from ..arm.spatial import from_pseudo_inertia, pseudo_inertia
from ..errors import IdentError, NumericalError
from .compress import Reduced
from .least_squares import LeastSquares
from .result import Bounds

_NONNEG_TERMS = ("fv", "fc", "ia", "fcp", "fcn")

#: Velocities (rad/s or m/s) at which the consistent fit keeps joint friction dissipative, f(v) v >= 0:
#: from well inside the slow zone to beyond what an arm's joints reach.
DISSIPATION_GRID = np.geomspace(1e-4, 10.0, 60)


def dissipation_rows(terms) -> tuple[np.ndarray, np.ndarray]:
    """Rows (g, k) giving a joint's friction f(v) and f(-v) at the velocities of :data:`DISSIPATION_GRID`
    for its k term coefficients (offset and armature are not friction: zero columns)."""
    v = DISSIPATION_GRID
    pos = {"fv": v, "fc": np.ones_like(v), "fcp": np.ones_like(v), "fcn": np.zeros_like(v)}
    neg = {"fv": -v, "fc": -np.ones_like(v), "fcp": np.zeros_like(v), "fcn": -np.ones_like(v)}
    for k, sc in enumerate(LOW_SPEED_SCALES):
        pos[f"fl{k + 1}"] = np.tanh(v / sc)
        neg[f"fl{k + 1}"] = -np.tanh(v / sc)
    zero = np.zeros_like(v)
    return (np.stack([pos.get(c, zero) for c in terms], 1), np.stack([neg.get(c, zero) for c in terms], 1))


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


def consistent_fit(robot, terms, P, red_w: Reduced, wls: LeastSquares, prior_full, bounds: Bounds, gamma: float, solver: str):
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
        shaped = any(c.startswith("fl") for c in terms)
        for k, code in enumerate(terms):
            # with a low-speed shape, the Coulomb level alone need not be positive: the sum must
            if code in _NONNEG_TERMS and not (shaped and code == "fc"):
                cons.append(u[k::nt] >= 0)
        if any(c in DRY_FRICTION_TERMS for c in terms):
            # friction opposes motion at every speed: f(v) >= 0 for v > 0 and f(-v) <= 0, linear in the coefficients
            Dp, Dn = dissipation_rows(terms)
            for j in range(n):
                cj = x[10 * n + j * nt : 10 * n + (j + 1) * nt]
                cons += [Dp @ cj >= 0, Dn @ cj <= 0]
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
            given = [f"total mass {bounds.total_mass:g} kg"] if bounds.total_mass is not None else []
            given += [f"mass of {b} {lo:g}..{hi:g} kg" for b, (lo, hi) in bounds.mass.items()] + [f"COM box of {b}" for b in bounds.com]
            why = (f"the bounds ({'; '.join(given)}) cannot hold together with the data's base parameters and physical links"
                   if given else "check the data: the physical constraints admit no fit")
            raise NumericalError(f"consistent fit: solver {solver} ended with status '{status}': {why}")
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
