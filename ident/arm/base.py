"""Base (identifiable) parameters: which regrouped combinations of the full parameters the joint
torques determine (numerical method of Gautier 1990).

The regressor is stacked at random states drawn over the whole joint range (with random
velocities and accelerations). Columns whose norm is negligible are *structurally zero*. The
remaining columns are scanned in their natural order (body by body from the base, then joint
terms) with a QR factorization: a column whose |R_ii| falls below ``rtol`` times the largest
(after scaling every column to unit norm) lies in the span of the columns before it and is
*regrouped* into them; QR with column pivoting confirms the rank independently of the order.
So the usual textbook choice comes out: distal quantities regroup into
proximal ones (``link2.zz`` absorbs ``link3.m``) and the first joint's armature of a vertical
axis joins ``link1.zz``.

With the independent columns ``b`` and the regrouped columns ``d``, ``Y pi = Y_b beta`` with
``beta = pi_b + K pi_d`` for every motion.
"""

from __future__ import annotations

import hashlib
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from ..blas import single_thread_blas
from ..errors import IdentError, NumericalError
from .model import Robot, parse_terms
from .regressor import regressor

#: Relative rank tolerance on |R_ii| of the column-normalized stacked regressor.
RTOL = 1e-8
#: Columns whose norm is below this fraction of the largest column norm are structurally zero.
ZERO_TOL = 1e-10
#: Regrouping coefficients below this magnitude are dropped from the printed relations.
COEF_TOL = 1e-9
#: A printed coefficient is the shortest decimal within this relative distance of the computed one,
#: so products of link lengths come out exact (0.0119137225, not 0.0119137).
COEF_RTOL = 1e-9


def _coefficient(mag: float) -> str:
    """Shortest decimal text of a positive coefficient within ``COEF_RTOL`` (at most 12 digits)."""
    for digits in range(1, 13):
        text = f"{mag:.{digits}g}"
        if abs(float(text) - mag) <= COEF_RTOL * mag:
            return text
    return f"{mag:.12g}"


class SamplingWarning(UserWarning):
    """The sample set used for the base parameters does not span the joints' ranges."""


@dataclass
class BaseParameters:
    """The base parameter set of a robot for a choice of joint terms.

    Attributes
    ----------
    full_names : (p,) names of the full parameter vector (regressor columns).
    independent : (b,) int, full-column indices of the base set, in natural order.
    regrouped : (d,) int, indices of columns regrouped into the base set.
    zero : (z,) int, indices of structurally zero columns (they never affect the torque).
    K : (b, d) regrouping matrix, beta = pi[independent] + K pi[regrouped].
    names : (b,) base parameter names: the leading column's name, with suffix ``R`` when regrouped.
    """

    robot_name: str
    terms: tuple[str, ...]
    full_names: list[str]
    independent: np.ndarray
    regrouped: np.ndarray
    zero: np.ndarray
    K: np.ndarray
    names: list[str]
    rtol: float
    n_states: int
    seed: int
    warnings: list[str] = field(default_factory=list)

    @property
    def n_base(self) -> int:
        """Number of base parameters b."""
        return len(self.independent)

    @property
    def n_full(self) -> int:
        """Number of full parameters p."""
        return len(self.full_names)

    @property
    def projection(self) -> np.ndarray:
        """(b, p) matrix P with beta = P pi."""
        P = np.zeros((self.n_base, self.n_full))
        P[np.arange(self.n_base), self.independent] = 1.0
        P[:, self.regrouped] = self.K
        return P

    def project(self, pi: np.ndarray) -> np.ndarray:
        """Base parameters beta (..., b) of full parameters pi (..., p)."""
        pi = np.asarray(pi, dtype=float)
        if pi.shape[-1] != self.n_full:
            raise IdentError(f"parameters: expected {self.n_full} full parameters, got {pi.shape[-1]}")
        return pi[..., self.independent] + pi[..., self.regrouped] @ self.K.T

    def columns(self, Y: np.ndarray) -> np.ndarray:
        """Base regressor Y_b (..., b) from the full regressor Y (..., p)."""
        return Y[..., self.independent]

    def relations(self, coef_tol: float = COEF_TOL) -> list[str]:
        """Readable regrouping, one string a base parameter: ``link2.zzR = link2.zz + 0.1225*link3.m + ...``.

        Each coefficient is printed as the shortest decimal within a relative ``COEF_RTOL`` (1e-9) of
        its computed value, so the usual parallel- and perpendicular-axis products of link lengths
        read exactly; coefficients of magnitude below `coef_tol` are omitted.
        """
        out = []
        for i, name in enumerate(self.names):
            expr = self.full_names[self.independent[i]]
            for j, col in enumerate(self.regrouped):
                c = self.K[i, j]
                if abs(c) < coef_tol:
                    continue
                mag = abs(c)
                coef = "" if abs(mag - 1.0) < COEF_RTOL else f"{_coefficient(mag)}*"
                expr += f" {'-' if c < 0 else '+'} {coef}{self.full_names[col]}"
            out.append(f"{name} = {expr}" if name != self.full_names[self.independent[i]] else name)
        return out

    def per_joint_terms(self) -> dict[str, int]:
        """Counts of base columns by kind: inertial and each joint-term code."""
        counts = {"inertial": 0}
        for idx in self.independent:
            suffix = self.full_names[idx].rsplit(".", 1)[1]
            key = suffix if suffix in ("fv", "fc", "fo", "ia") else "inertial"
            counts[key] = counts.get(key, 0) + 1
        return counts

    def to_dict(self) -> dict:
        """A JSON-ready description: counts, names, regroupings and structurally zero columns."""
        return {
            "robot": self.robot_name,
            "terms": list(self.terms),
            "full_count": self.n_full,
            "base_count": self.n_base,
            "counts_by_kind": self.per_joint_terms(),
            "base": [
                {
                    "name": name,
                    "leading": self.full_names[self.independent[i]],
                    "relation": rel,
                    "regrouped": {self.full_names[c]: float(self.K[i, j]) for j, c in enumerate(self.regrouped) if abs(self.K[i, j]) >= COEF_TOL},
                }
                for i, (name, rel) in enumerate(zip(self.names, self.relations()))
            ],
            "structurally_zero": [self.full_names[c] for c in self.zero],
            "rank_tolerance": self.rtol,
            "states": self.n_states,
            "seed": self.seed,
            "warnings": list(self.warnings),
        }


def random_states(robot: Robot, n_states: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """States drawn over the whole joint range: q uniform within limits (continuous and unlimited
    revolute joints over a full turn, unlimited prismatic joints over +-1 m), q' and q'' uniform in
    +-velocity limit (or +-2 rad/s) and +-(2x that) per second. Each (n_states, n)."""
    lo, hi = robot.lower.copy(), robot.upper.copy()
    rev = robot.joint_type == 0
    unl = ~np.isfinite(lo) | ~np.isfinite(hi)
    lo[unl & rev], hi[unl & rev] = -np.pi, np.pi
    lo[unl & ~rev], hi[unl & ~rev] = -1.0, 1.0
    v = np.where(np.isfinite(robot.velocity_limit), robot.velocity_limit, 2.0)
    q = rng.uniform(lo, hi, (n_states, robot.n))
    dq = rng.uniform(-v, v, (n_states, robot.n))
    ddq = rng.uniform(-2 * v, 2 * v, (n_states, robot.n))
    return q, dq, ddq


def _span_warnings(robot: Robot, q, dq, ddq) -> list[str]:
    """Joints whose samples do not spread over their range (held still or nearly so)."""
    msgs = []
    lo, hi = robot.lower, robot.upper
    full = np.where(np.isfinite(hi - lo), hi - lo, np.where(robot.joint_type == 0, 2 * np.pi, 2.0))
    spread = q.max(axis=0) - q.min(axis=0)
    for j, name in enumerate(robot.joint_names):
        if spread[j] < 0.1 * full[j]:
            msgs.append(f"joint '{name}' spans {spread[j]:.3g} of its {full[j]:.3g} range: the sample set does not cover the joint range, so the base set may be too small")
        elif np.ptp(dq[:, j]) == 0 or np.ptp(ddq[:, j]) == 0:
            msgs.append(f"joint '{name}' has constant velocity or acceleration in the samples: the base set may be too small")
    return msgs


def _fingerprint(robot: Robot) -> str:
    h = hashlib.sha1()
    for arr in (robot.parent, robot.joint_type, robot.R_fix, robot.p_fix, robot.axis, robot.gravity, robot.lower, robot.upper, robot.velocity_limit):
        h.update(np.ascontiguousarray(arr).tobytes())
    h.update("\0".join(robot.joint_names + robot.body_names).encode())
    return h.hexdigest()


def _split(W: np.ndarray, rtol: float, name: str):
    """Structurally zero, independent and regrouped columns of the stacked regressor W (rows, p),
    and K (b, d) with W[:, regrouped] = W[:, independent] K."""
    norms = np.linalg.norm(W, axis=0)
    if not norms.max() > 0:
        raise NumericalError(f"{name}: the regressor is zero at every sample")
    zero = np.flatnonzero(norms <= ZERO_TOL * norms.max())
    live = np.flatnonzero(norms > ZERO_TOL * norms.max())
    Wn = W[:, live] / norms[live]
    R = scipy.linalg.qr(Wn, mode="r", check_finite=False)[0]
    diag = np.zeros(Wn.shape[1])
    diag[: min(Wn.shape)] = np.abs(np.diag(R))  # fewer rows than columns: the rest are dependent
    keep = diag > rtol * diag.max()
    # The natural-order scan picks the textbook base set; QR with column pivoting (Gautier 1990)
    # gives the rank independently of the column order, and the two must agree.
    Rp = scipy.linalg.qr(Wn, mode="r", pivoting=True, check_finite=False)[0]
    dp = np.abs(np.diag(Rp))
    rank = int(np.sum(dp > rtol * dp[0]))
    if rank != int(keep.sum()):
        raise NumericalError(f"{name}: rank {rank} from pivoted QR differs from the {int(keep.sum())} columns of the ordered scan at rank tolerance {rtol:g}; use more states or another tolerance")
    independent = live[keep]
    regrouped = live[~keep]
    Wi = W[:, independent]
    if regrouped.size:
        # Solve in unit-norm column space (well scaled), then one step of iterative refinement.
        Wi_n, Wd_n = Wn[:, keep], Wn[:, ~keep]
        Kn, *_ = scipy.linalg.lstsq(Wi_n, Wd_n, check_finite=False)
        Kn += scipy.linalg.lstsq(Wi_n, Wd_n - Wi_n @ Kn, check_finite=False)[0]
        K = Kn / norms[independent][:, None] * norms[regrouped][None, :]  # (b, d)
        resid = np.linalg.norm(W[:, regrouped] - Wi @ K, axis=0) / norms[regrouped]
        if resid.max() > 1e-6:
            raise NumericalError(f"{name}: base-parameter regrouping is not exact (relative residual {resid.max():.1e}); the rank tolerance {rtol:g} is too loose for these samples")
        K[np.abs(K) < 1e-12 * max(1.0, np.abs(K).max())] = 0.0
    else:
        K = np.zeros((independent.size, 0))
    sv = np.linalg.svd(Wi / norms[independent], compute_uv=False)
    if sv[-1] < 1e-3 * rtol * sv[0]:
        raise NumericalError(f"{name}: the base set found is ill-conditioned (smallest/largest singular value {sv[-1] / sv[0]:.1e}); use more states")
    return zero, independent, regrouped, K


_CACHE: dict = {}


def base_parameters(robot: Robot, terms=(), *, n_states: int = 400, seed: int = 0, rtol: float = RTOL, states=None) -> BaseParameters:
    """Compute (or fetch from the cache) the base parameters of `robot` with joint `terms`.

    Parameters
    ----------
    robot : the model.
    terms : joint terms carried by the regressor (codes fv, fc, fo, ia).
    n_states : number of random states stacked (ignored when `states` is given).
    seed : seed of the ``numpy.random.Generator`` that draws the states.
    rtol : relative rank tolerance on |R_ii| of the unit-norm-column stacked regressor.
    states : optional (q, q', q'') arrays (N, n) to use instead of random states; a
        :class:`SamplingWarning` is issued when they do not span the joint ranges (a joint over
        less than 10 % of its range, or with constant velocity or acceleration) or when N n is
        below the number of columns p: the count may then come out too small.

    Returns
    -------
    BaseParameters, cached per robot, terms, n_states, seed and rtol.

    Raises
    ------
    IdentError : negative seed, or fewer than p / n random states (p regressor columns).
    NumericalError : the ordered scan and pivoted QR disagree on the rank, the regrouping is not
        exact, or the base set is ill-conditioned.
    """
    codes = parse_terms(terms)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise IdentError(f"seed: expected a non-negative integer, got {seed!r}")
    n_cols = robot.n_params(codes)
    if states is None and (isinstance(n_states, bool) or not isinstance(n_states, (int, np.integer)) or n_states * robot.n < n_cols):
        # fewer equations than columns cannot reveal the full rank: the count would come out too small
        raise IdentError(f"n_states: {n_states!r} states give fewer equations than the {n_cols} regressor columns; use at least {-(-n_cols // robot.n)}")
    key = (_fingerprint(robot), codes, n_states, seed, rtol) if states is None else None
    if key is not None and key in _CACHE:
        return _CACHE[key]
    msgs = []
    if states is None:
        q, dq, ddq = random_states(robot, n_states, np.random.default_rng(seed))
    else:
        q, dq, ddq = robot.check_states(*states)
        msgs = _span_warnings(robot, q, dq, ddq)
        if q.shape[0] * robot.n < n_cols:
            msgs.append(f"{q.shape[0]} states give {q.shape[0] * robot.n} equations for {n_cols} regressor columns: the base set may be too small")
        for m in msgs:
            warnings.warn(m, SamplingWarning, stacklevel=2)
    W = regressor(robot, q, dq, ddq, codes).reshape(-1, robot.n_params(codes))
    names = robot.param_names(codes)
    with single_thread_blas():  # small dense factorizations: BLAS threads only cost time here
        zero, independent, regrouped, K = _split(W, rtol, robot.name)
    base_names = []
    for i, col in enumerate(independent):
        regroups = regrouped.size and np.any(np.abs(K[i]) >= COEF_TOL)
        base_names.append(names[col] + ("R" if regroups else ""))
    result = BaseParameters(
        robot_name=robot.name,
        terms=codes,
        full_names=names,
        independent=independent,
        regrouped=regrouped,
        zero=zero,
        K=K,
        names=base_names,
        rtol=rtol,
        n_states=q.shape[0],
        seed=seed,
        warnings=msgs,
    )
    if key is not None:
        _CACHE[key] = result
    return result
