"""Payload identification: the inertia of a load rigidly attached to the last link of an arm whose
own parameters are already known (a parameter file).

A rigid payload adds its 10 inertial parameters to those of the body it is fixed to, so with the
arm's torque ``Y pi_arm`` known, the residual ``tau - Y pi_arm`` is linear in the payload's 10
parameters: the body's 10 regressor columns. They are compressed per joint exactly like the full
problem (:mod:`ident.estimation.compress`), then:

1. least squares, then weighted least squares with per-joint noise from the OLS residuals, giving
   the unconstrained estimate and its covariance (used for the zero-payload check: with no load,
   the mass should be zero within its uncertainty). By default the covariance is the delete-one
   block jackknife over contiguous time blocks (:mod:`ident.estimation.uncertainty`, blocks by the
   rule of :mod:`ident.estimation.blocks`), which holds on filtered closed-loop data where the
   classic ``s^2 (W^T W)^-1`` is several times too small;
2. a consistent estimate: the 4x4 pseudo-inertia of the payload is the decision variable of a small
   SDP (positive semidefinite by construction) minimising the same weighted residual. When the
   WLS estimate is already physical the two coincide.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy.linalg
import yaml

from ..arm.model import Robot
from ..arm.parameters import ParameterSet
from ..arm.regressor import iter_regressor
from ..arm.spatial import PARAM_SUFFIXES, from_pseudo_inertia, from_vector, matrix_to_sym, pseudo_inertia, sym_to_matrix, transform_params
from ..blas import single_thread_blas
from ..errors import DataError, IdentError, NumericalError
from ..fileio import read_yaml, write_text
from .blocks import BlockStore, block_length, block_ranges, merge_triangles
from .compress import data_timing, fold_rows, iter_segments
from .uncertainty import UNCERTAINTY, block_jackknife, embed_gram

FORMAT = "ident-payload/1"
#: Scaled singular values below this fraction of the largest make the payload unidentifiable.
RANK_TOL = 1e-8


@dataclass
class PayloadResult:
    """Identified payload.

    Attributes
    ----------
    robot_name, body : model name and the body the payload is fixed to.
    frame : name of the frame the results are expressed in (the body's frame by default).
    params : (10,) consistent payload parameters in `frame` (mass kg, first moment kg m, inertia
        about the frame origin kg m^2).
    params_ls : (10,) unconstrained WLS estimate in the body frame; cov : (10, 10) its covariance.
    residual_rms_before, residual_rms_after : (n,) per-joint RMS of ``tau - Y pi_arm`` and of
        the residual after the payload is accounted for (N m or N).
    samples, sources : the data used. solver : details of the SDP step.
    uncertainty : how `cov` was obtained ({"method": "blocks" | "classic", "blocks": count}).
    """

    robot_name: str
    joint_names: list[str]
    body: str
    frame: str
    params: np.ndarray
    params_ls: np.ndarray
    cov: np.ndarray
    residual_rms_before: np.ndarray
    residual_rms_after: np.ndarray
    samples: int
    sources: list[str]
    solver: dict = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    uncertainty: dict = field(default_factory=lambda: {"method": "classic"})

    @property
    def mass(self) -> float:
        """Payload mass, kg."""
        return float(self.params[0])

    @property
    def mass_std(self) -> float:
        """Standard deviation of the unconstrained mass estimate, kg."""
        return float(np.sqrt(max(self.cov[0, 0], 0.0)))

    @property
    def std_ls(self) -> np.ndarray:
        """(10,) standard deviations of the unconstrained estimate (body frame)."""
        return np.sqrt(np.maximum(np.diag(self.cov), 0.0))

    @property
    def com(self) -> np.ndarray:
        """(3,) centre of mass in `frame`, m (NaN when the mass is zero)."""
        if self.params[0] <= 0:
            return np.full(3, np.nan)
        return self.params[1:4] / self.params[0]

    @property
    def inertia_com(self) -> np.ndarray:
        """(3, 3) inertia about the centre of mass, `frame` axes, kg m^2 (NaN when the mass is zero)."""
        if self.params[0] <= 0:
            return np.full((3, 3), np.nan)
        return from_vector(self.params)[2]

    def significant(self, k: float = 3.0) -> bool:
        """Whether the unconstrained mass differs from zero by more than `k` standard deviations."""
        return abs(self.params_ls[0]) > k * self.mass_std

    def to_dict(self) -> dict:
        """YAML-ready document of format :data:`FORMAT`."""
        doc = {
            "format": FORMAT,
            "robot": self.robot_name,
            "body": self.body,
            "frame": self.frame,
            "mass": float(self.mass),
            "mass_std": float(self.mass_std),
            "significant": bool(self.significant()),
            "uncertainty": dict(self.uncertainty),
        }
        if self.params[0] > 0:
            doc["com"] = [float(x) for x in self.com]
            doc["inertia_com"] = dict(zip(("xx", "xy", "xz", "yy", "yz", "zz"), (float(x) for x in matrix_to_sym(self.inertia_com))))
        doc["unconstrained"] = {
            "frame": self.body,
            "values": {s: float(v) for s, v in zip(PARAM_SUFFIXES, self.params_ls)},
            "std": {s: float(v) for s, v in zip(PARAM_SUFFIXES, self.std_ls)},
        }
        doc["residual_rms"] = {
            "before": {j: float(v) for j, v in zip(self.joint_names, self.residual_rms_before)},
            "after": {j: float(v) for j, v in zip(self.joint_names, self.residual_rms_after)},
        }
        doc["data"] = {"samples": int(self.samples), "sources": list(self.sources)}
        if self.solver:
            doc["solver"] = dict(self.solver)
        if self.warnings:
            doc["warnings"] = list(self.warnings)
        return doc

    def summary(self) -> str:
        """Short text report."""
        lines = [f"Payload on {self.body} of {self.robot_name} ({self.samples} samples), expressed in frame {self.frame}:"]
        lines.append(f"  mass            {self.mass:.5g} kg  (unconstrained {self.params_ls[0]:.5g} +- {self.mass_std:.2g} kg)")
        u = self.uncertainty
        how = (f"block jackknife over {u.get('blocks')} time blocks" if u.get("method") == "blocks"
               else "classic s^2 (W^T W)^-1, assumes white residuals")
        lines.append(f"  std from        {how}")
        if self.params[0] > 0:
            lines.append("  COM             " + ", ".join(f"{x:.5g}" for x in self.com) + " m")
            I = matrix_to_sym(self.inertia_com)
            lines.append("  inertia at COM  " + ", ".join(f"{k} {v:.4g}" for k, v in zip(("xx", "xy", "xz", "yy", "yz", "zz"), I)) + " kg m^2")
        if not self.significant():
            lines.append("  the mass is not significantly different from zero (|m| < 3 std): no payload detected")
        lines.append("  residual RMS per joint before -> after: " + ", ".join(
            f"{j} {a:.3g} -> {b:.3g}" for j, a, b in zip(self.joint_names, self.residual_rms_before, self.residual_rms_after)))
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def identify_payload(robot: Robot, params: ParameterSet, data, body: str | None = None, frame: str | None = None,
                     solver: str = "CLARABEL", progress=None, uncertainty: str = "blocks") -> PayloadResult:
    """Identify a payload rigidly fixed to `body` (default: the last link) of an identified arm.

    Parameters
    ----------
    robot : the model.
    params : the arm's identified parameters (checked against `robot`).
    data : a data set, a tuple ``(q, dq, ddq, tau)`` of (N, n) SI arrays, or a list of those,
        recorded with the payload attached.
    body : body carrying the payload (default: the last one).
    frame : name of a link frame on that body to express the result in (default: the body frame).
    solver : cvxpy solver for the consistent step.
    progress : optional callable ``progress(samples_done, samples_total)``.
    uncertainty : "blocks" (default: block jackknife covariance, also behind `significant`) or
        "classic" (s^2 (W^T W)^-1).
    """
    if uncertainty not in UNCERTAINTY:
        raise IdentError(f"uncertainty: '{uncertainty}' is not one of {', '.join(UNCERTAINTY)}")
    params = params.check_robot(robot, where="arm parameters")
    k = robot.n - 1 if body is None else _body_index(robot, body)
    body_name = robot.body_names[k]
    R_f, p_f, frame_name = np.eye(3), np.zeros(3), body_name
    if frame is not None:
        fr = robot.frame(frame)
        if fr.body != k:
            raise IdentError(f"frame '{frame}' is not fixed to body '{body_name}' that carries the payload")
        R_f, p_f, frame_name = fr.R, fr.p, frame
    pi_arm = params.vector()
    terms = params.terms
    n = robot.n
    tri = [np.zeros((11, 11)) for _ in range(n)]
    rss0 = np.zeros(n)
    segs = list(iter_segments(robot, data))
    total = sum(s[1].shape[0] for s in segs)
    dt, cutoff = data_timing(data)
    L = block_length([s[1].shape[0] for s in segs], dt, cutoff)
    store = BlockStore()
    done, samples, sources = 0, 0, []
    cols = slice(10 * k, 10 * k + 10)
    with single_thread_blas():
        for source, q, dq, ddq, tau in segs:
            try:
                q, dq, ddq, tau = robot.check_states(q, dq, ddq, tau, names=("q", "dq", "ddq", "tau"))
            except IdentError as exc:
                raise DataError(f"{source}: {exc}") from None
            for a, b in block_ranges(q.shape[0], L):
                blk = [np.zeros((11, 11)) for _ in range(n)]
                for sl, Y in iter_regressor(robot, q[a:b], dq[a:b], ddq[a:b], terms):
                    r = tau[a + sl.start : a + sl.stop] - Y @ pi_arm
                    rss0 += np.einsum("ij,ij->j", r, r)
                    for j in range(n):
                        if robot.ancestors[k, j]:
                            blk[j] = fold_rows(blk[j], Y[:, j, cols], r[:, j])
                    if progress is not None:
                        progress(done + a + sl.stop, total)
                tri = [merge_triangles(T, B) for T, B in zip(tri, blk)]
                store.append(blk, np.full(n, b - a))
            done += q.shape[0]
            samples += q.shape[0]
            sources.append(source)
    if samples == 0:
        raise DataError("no samples in the payload data")
    carriers = [j for j in range(n) if robot.ancestors[k, j]]
    pi_ols, _, _ = _ls(tri, carriers, np.ones(n), samples * len(carriers))
    dof = samples - 10.0 / len(carriers)
    rss = np.array([_rss(tri[j], pi_ols) for j in range(n)])
    sigma = np.sqrt(rss / dof)
    rms_tau = np.sqrt(rss0 / samples)
    w = 1.0 / np.maximum(sigma, 1e-12 * np.maximum(rms_tau, 1e-300))
    pi_w, cov, (Rw, zw, _) = _ls(tri, carriers, w, samples * len(carriers))
    msgs = []
    unc = {"method": "classic"}
    if uncertainty == "blocks":
        ten = [np.arange(10) if j in carriers else None for j in range(n)]
        grams = np.stack([embed_gram(blk, ten, 10, w) for blk in store.blocks])
        cov_b, why = block_jackknife(grams, pi_w)
        if cov_b is None:
            msgs.append(f"block jackknife not possible ({why}): classic standard deviations (likely too small)")
        else:
            cov, unc = cov_b, {"method": "blocks", "blocks": len(store)}
    ev = np.linalg.eigvalsh(pseudo_inertia(pi_w))
    t0 = time.perf_counter()
    if ev[0] >= 0:
        pi_c, info = pi_w.copy(), {"stage": "unconstrained estimate is physical"}
    else:
        pi_c = _consistent_payload(Rw, zw, solver)
        info = {"stage": "SDP", "solver": solver}
        msgs.append("the unconstrained estimate is not physically realizable (pseudo-inertia eigenvalue "
                    f"{ev[0]:.3g}); the consistent estimate is the closest physical payload in the weighted residual")
    info["seconds"] = round(time.perf_counter() - t0, 3)
    rms_after = np.sqrt(np.array([_rss(tri[j], pi_c) for j in range(n)]) / samples)
    for j in range(n):
        if j not in carriers:
            rms_after[j] = rms_tau[j]
    # Express in the requested frame: frame F sits at (R_f, p_f) in the body frame B.
    params_f = transform_params(pi_c, R_f.T, -R_f.T @ p_f) if frame is not None else pi_c
    return PayloadResult(
        robot_name=robot.name, joint_names=list(robot.joint_names), body=body_name, frame=frame_name,
        params=params_f, params_ls=pi_w, cov=cov, residual_rms_before=rms_tau, residual_rms_after=rms_after,
        samples=samples, sources=sources, solver=info, warnings=msgs, uncertainty=unc,
    )


def _body_index(robot: Robot, body: str) -> int:
    if body not in robot.body_names:
        raise IdentError(f"payload body: '{body}' is not a body of {robot.name} (bodies: {', '.join(robot.body_names)})")
    return robot.body_names.index(body)


def _rss(T: np.ndarray, x: np.ndarray) -> float:
    r = T[:, :-1] @ x - T[:, -1]
    return float(r @ r)


def _ls(tri, carriers, w, rows: int):
    """Weighted LS on the stacked per-joint triangles: estimate (10,), covariance, (R, z, rho)."""
    S = np.vstack([w[j] * tri[j] for j in carriers])
    T = scipy.linalg.qr(S, mode="r", check_finite=False)[0][:11]
    R, z, rho = T[:10, :10], T[:10, 10], abs(T[10, 10])
    scale = np.linalg.norm(R, axis=0)
    if np.any(scale == 0):
        raise NumericalError("payload: the data do not excite the payload at all (a parameter has a zero column)")
    s = np.linalg.svd(R / scale, compute_uv=False)
    if s[-1] < RANK_TOL * s[0]:
        raise NumericalError(f"payload: the data do not determine all 10 payload parameters (scaled condition number {s[0] / s[-1]:.3g}); move every joint, the wrist joints included")
    if rows <= 10:
        raise NumericalError(f"payload: {rows} equations are not enough for 10 parameters")
    x = scipy.linalg.solve_triangular(R, z, check_finite=False)
    Rinv = scipy.linalg.solve_triangular(R, np.eye(10), check_finite=False)
    cov = rho**2 / (rows - 10) * (Rinv @ Rinv.T)
    return x, cov, (R, z, rho)


def _consistent_payload(R: np.ndarray, z: np.ndarray, solver: str) -> np.ndarray:
    import cvxpy as cp

    J = cp.Variable((4, 4), PSD=True)
    # pseudo-inertia -> 10 parameters is linear: one constant matrix on vec(J) (order F).
    E = np.zeros((16, 4, 4))
    E[np.arange(16), np.arange(16) % 4, np.arange(16) // 4] = 1.0
    pi = from_pseudo_inertia(E).T @ cp.vec(J, order="F")
    scale = max(np.abs(R).max(), 1e-300)
    prob = cp.Problem(cp.Minimize(cp.sum_squares((R / scale) @ pi - z / scale)))
    try:
        prob.solve(solver=solver, ignore_dpp=True)
    except (cp.error.SolverError, ValueError) as exc:
        raise NumericalError(f"payload: solver {solver} failed ({exc})") from None
    if prob.status not in ("optimal", "optimal_inaccurate") or J.value is None:
        raise NumericalError(f"payload: solver {solver} ended with status '{prob.status}'")
    Jv = 0.5 * (J.value + J.value.T)
    # The interior-point answer meets the cone only to the solver's tolerance; clipping those
    # tiny negative eigenvalues keeps the payload physical by construction, not just nearly.
    ev, V = np.linalg.eigh(Jv)
    return from_pseudo_inertia((V * np.maximum(ev, 0.0)) @ V.T)


def save_payload(path, result: PayloadResult) -> None:
    """Write the payload result as YAML (format :data:`FORMAT`), atomically."""
    header = "# ident payload file. SI units: mass kg, com m, inertia_com kg m^2 about the COM, in `frame`.\n"
    write_text(path, header + yaml.safe_dump(result.to_dict(), sort_keys=False, default_flow_style=None, width=120))


def load_payload(path) -> dict:
    """Read a payload file; returns {"body", "frame", "mass", "com", "inertia_com" (3, 3)}."""
    p = Path(path)
    doc = read_yaml(p, "payload file", DataError)
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise DataError(f"{p}: not a payload file (expected 'format: {FORMAT}')")
    for key in ("body", "frame", "mass"):
        if key not in doc:
            raise DataError(f"{p}: missing key '{key}'")
    out = {"body": doc["body"], "frame": doc["frame"], "mass": float(doc["mass"])}
    if "com" in doc:
        out["com"] = np.array(doc["com"], float)
        I = doc["inertia_com"]
        out["inertia_com"] = sym_to_matrix(np.array([I[k] for k in ("xx", "xy", "xz", "yy", "yz", "zz")], float))
    return out
