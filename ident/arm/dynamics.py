"""Batched rigid-body dynamics of a :class:`ident.arm.model.Robot` over N samples.

The equation of motion, with per-joint terms (viscous ``fv``, Coulomb ``fc``, offset ``fo``,
armature ``ia``) and a wrench F exerted by the arm on its environment at a point of a link::

    tau = M(q) q'' + c(q, q') + g(q) + fv q' + fc sign(q') + fo + ia q'' + J(q)^T F

Shapes: ``q``, ``dq``, ``ddq``, ``tau`` are (N, n) (a single (n,) sample is accepted); results are
(N, n) torques (N m, or N for prismatic joints), (N, n, n) mass matrices. ``inertial`` is the
(n, 10) body parameter array (default: the description's prior); ``joint_params`` maps term codes
to (n,) coefficients, e.g. ``{"fv": [...], "ia": [...]}``.
"""

from __future__ import annotations

import numpy as np

from ..errors import IdentError
from . import kernels
from .model import JOINT_TERMS, Robot, kernel_arrays

CHUNK = 8192


def _chunks(N: int, size: int = CHUNK):
    for start in range(0, N, size):
        yield slice(start, min(N, start + size))


def check_joint_params(robot: Robot, joint_params) -> dict[str, np.ndarray]:
    """Validate a {term code: (n,) coefficients} mapping (None -> {})."""
    if joint_params is None:
        return {}
    out = {}
    for code, vals in dict(joint_params).items():
        if code not in JOINT_TERMS:
            raise IdentError(f"joint parameters: unknown term '{code}' (expected one of {', '.join(JOINT_TERMS)})")
        v = np.asarray(vals, dtype=float).reshape(-1)
        if v.size != robot.n or not np.all(np.isfinite(v)):
            raise IdentError(f"joint parameters '{code}': expected {robot.n} finite values, got {np.size(vals)}")
        out[code] = v
    return out


def joint_term_torque(robot: Robot, dq, ddq, joint_params) -> np.ndarray:
    """Per-joint terms fv q' + fc sign(q') + fo + ia q'' (N, n); sign(0) = 0."""
    dq, ddq = robot.check_states(dq, ddq, names=("dq", "ddq"))
    jp = check_joint_params(robot, joint_params)
    tau = np.zeros_like(dq)
    if "fv" in jp:
        tau += jp["fv"] * dq
    if "fc" in jp:
        tau += jp["fc"] * np.sign(dq)
    if "fo" in jp:
        tau += jp["fo"]
    if "ia" in jp:
        tau += jp["ia"] * ddq
    return tau


def _base_accel(robot: Robot, gravity: bool) -> np.ndarray:
    return -robot.gravity if gravity else np.zeros(3)


def rnea(robot: Robot, q, dq, ddq, inertial=None, gravity: bool = True, out=None) -> np.ndarray:
    """Recursive Newton-Euler: rigid-body torque M(q) q'' + c(q, q') + g(q) (N, n), no joint terms.

    ``gravity=False`` leaves g(q) out. `out` (N, n) is filled in place when given.
    """
    q, dq, ddq = robot.check_states(q, dq, ddq)
    params = robot.check_inertial(inertial)
    if out is None:
        out = np.empty_like(q)
    a0 = _base_accel(robot, gravity)
    args = kernel_arrays(robot)
    for sl in _chunks(q.shape[0]):
        kernels.rnea_chunk(q[sl], dq[sl], ddq[sl], *args, a0, params, out[sl])
    return out


def inverse_dynamics(robot: Robot, q, dq, ddq, inertial=None, joint_params=None, gravity: bool = True) -> np.ndarray:
    """Joint torques tau (N, n) for motion (q, q', q'') (rad, rad/s, rad/s^2; m for prismatic), by RNEA plus joint terms."""
    tau = rnea(robot, q, dq, ddq, inertial, gravity)
    if joint_params:
        tau += joint_term_torque(robot, dq, ddq, joint_params)
    return tau


def mass_matrix(robot: Robot, q, inertial=None, armature=None) -> np.ndarray:
    """Joint-space mass matrix M(q) (N, n, n) by the composite-rigid-body algorithm; `armature` (n,) adds to the diagonal."""
    (q,) = robot.check_states(q, names=("q",))
    params = robot.check_inertial(inertial)
    out = np.empty((q.shape[0], robot.n, robot.n))
    args = kernel_arrays(robot)
    for sl in _chunks(q.shape[0]):
        kernels.crba_chunk(q[sl], *args, params, out[sl])
    if armature is not None:
        ia = check_joint_params(robot, {"ia": armature})["ia"]
        out[:, np.arange(robot.n), np.arange(robot.n)] += ia
    return out


def gravity_torque(robot: Robot, q, inertial=None) -> np.ndarray:
    """Gravity torque g(q) (N, n)."""
    (q,) = robot.check_states(q, names=("q",))
    z = np.zeros_like(q)
    return rnea(robot, q, z, z, inertial, gravity=True)


def velocity_torque(robot: Robot, q, dq, inertial=None) -> np.ndarray:
    """Centrifugal and Coriolis torque c(q, q') (N, n)."""
    q, dq = robot.check_states(q, dq, names=("q", "dq"))
    return rnea(robot, q, dq, np.zeros_like(q), inertial, gravity=False)


def forward_dynamics(robot: Robot, q, dq, tau, inertial=None, joint_params=None) -> np.ndarray:
    """Joint accelerations q'' = (M + diag(ia))^-1 (tau - c - g - fv q' - fc sign(q') - fo), (N, n)."""
    q, dq, tau = robot.check_states(q, dq, tau, names=("q", "dq", "tau"))
    jp = check_joint_params(robot, joint_params)
    bias = rnea(robot, q, dq, np.zeros_like(q), inertial, gravity=True)
    rest = {k: v for k, v in jp.items() if k != "ia"}
    if rest:
        bias += joint_term_torque(robot, dq, np.zeros_like(q), rest)
    M = mass_matrix(robot, q, inertial, jp.get("ia"))
    try:
        return np.linalg.solve(M, (tau - bias)[..., None])[..., 0]
    except np.linalg.LinAlgError:
        raise IdentError("forward dynamics: the mass matrix is singular (a body with no mass or inertia on a joint?)") from None


def body_poses(robot: Robot, q) -> tuple[np.ndarray, np.ndarray]:
    """Body orientations (N, n, 3, 3) and origins (N, n, 3) m in the base frame."""
    (q,) = robot.check_states(q, names=("q",))
    N = q.shape[0]
    Rw = np.empty((N, robot.n, 3, 3))
    pw = np.empty((N, robot.n, 3))
    args = kernel_arrays(robot)
    for sl in _chunks(N):
        kernels.poses_chunk(q[sl], *args, Rw[sl], pw[sl])
    return Rw, pw


def frame_pose(robot: Robot, q, frame: str, point=None) -> tuple[np.ndarray, np.ndarray]:
    """Orientation (N, 3, 3) and position (N, 3) m of link `frame` (or of `point` (3,) m given in that link's frame)."""
    fr = robot.frame(frame)
    pt = np.zeros(3) if point is None else np.asarray(point, dtype=float).reshape(3)
    local_p = fr.p + fr.R @ pt
    (q,) = robot.check_states(q, names=("q",))
    if fr.body < 0:
        N = q.shape[0]
        return np.broadcast_to(fr.R, (N, 3, 3)).copy(), np.broadcast_to(local_p, (N, 3)).copy()
    Rw, pw = body_poses(robot, q)
    Rb, pb = Rw[:, fr.body], pw[:, fr.body]
    return Rb @ fr.R, pb + Rb @ local_p


def jacobian(robot: Robot, q, frame: str, point=None) -> np.ndarray:
    """Geometric Jacobian (N, 6, n) of `point` on link `frame`: rows [linear velocity; angular velocity] in the base frame."""
    (q,) = robot.check_states(q, names=("q",))
    fr = robot.frame(frame)
    N = q.shape[0]
    J = np.zeros((N, 6, robot.n))
    if fr.body < 0:
        return J
    Rw, pw = body_poses(robot, q)
    _, x = frame_pose(robot, q, frame, point)
    for j in np.flatnonzero(robot.ancestors[fr.body]):
        z = Rw[:, j] @ robot.axis[j]
        if robot.joint_type[j] == 0:
            J[:, :3, j] = np.cross(z, x - pw[:, j])
            J[:, 3:, j] = z
        else:
            J[:, :3, j] = z
    return J


def wrench_torque(robot: Robot, q, frame: str, wrench, point=None) -> np.ndarray:
    """J(q)^T F (N, n): joint torque that balances a wrench F = [force (N); moment (N m)] (N, 6) or (6,).

    F is what the arm exerts on its environment at `point` (3,) m of link `frame`, expressed in the
    base frame; the moment is about that point.
    """
    J = jacobian(robot, q, frame, point)
    F = np.asarray(wrench, dtype=float)
    if F.shape[-1] != 6 or F.ndim > 2 or not np.all(np.isfinite(F)):
        raise IdentError(f"wrench: expected finite (N, 6) or (6,) [force; moment], got shape {F.shape}")
    F = np.broadcast_to(F, (J.shape[0], 6))
    return np.einsum("nki,nk->ni", J, F)


def energy(robot: Robot, q, dq, inertial=None) -> tuple[np.ndarray, np.ndarray]:
    """Kinetic energy 1/2 q'^T M q' and potential energy -g . (sum of m c) in the base frame, each (N,) J."""
    q, dq = robot.check_states(q, dq, names=("q", "dq"))
    params = robot.check_inertial(inertial)
    M = mass_matrix(robot, q, params)
    kin = 0.5 * np.einsum("ni,nij,nj->n", dq, M, dq)
    Rw, pw = body_poses(robot, q)
    first = params[:, 0][None, :, None] * pw + np.einsum("nkij,kj->nki", Rw, params[:, 1:4])
    pot = -np.einsum("nki,i->n", first, robot.gravity)
    return kin, pot
