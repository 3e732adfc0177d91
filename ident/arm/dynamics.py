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
from .model import DRY_FRICTION_TERMS, JOINT_TERMS, LOW_SPEED_SCALES, Robot, kernel_arrays

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


def term_columns(terms, dq, ddq, dry=None) -> np.ndarray:
    """Joint-term regressor columns (N, n, k) for the k codes in `terms`, from q' and q'' (N, n).

    `dry` (N, n, 4) optionally gives the dry-friction shape signals [sign(v), tanh(v/s_1..3)]
    already low-pass filtered like the torque (parallel filtering, see
    :mod:`ident.data.segments`); the sign- and shape-based columns (fc, fcp, fcn, fl1..fl3) are
    then taken from it, so a Coulomb step is smeared exactly as the filtered torque smears it.
    Without it they are evaluated on `dq` (sign(0) = 0).
    """
    dq = np.asarray(dq, dtype=float)
    ddq = np.asarray(ddq, dtype=float)
    if dry is None:
        sgn = np.sign(dq)

        def shape(k):  # only for the codes asked for: three tanh of a chunk cost more than its syrk
            return np.tanh(dq / LOW_SPEED_SCALES[k])
    else:
        dry = np.asarray(dry, dtype=float)
        if dry.shape != dq.shape + (4,):
            raise IdentError(f"dry-friction signals: expected shape {dq.shape + (4,)}, got {dry.shape}")
        sgn = dry[..., 0]

        def shape(k):
            return dry[..., 1 + k]
    cols = {"fv": lambda: dq, "fc": lambda: sgn, "fo": lambda: np.ones_like(dq), "ia": lambda: ddq,
            "fcp": lambda: 0.5 * (sgn + 1.0) if dry is not None else (dq > 0).astype(float),
            "fcn": lambda: 0.5 * (sgn - 1.0) if dry is not None else -(dq < 0).astype(float),
            "fl1": lambda: shape(0), "fl2": lambda: shape(1), "fl3": lambda: shape(2)}
    codes = list(terms)
    out = np.empty(dq.shape + (len(codes),))
    for t, c in enumerate(codes):
        if c not in cols:
            raise IdentError(f"joint parameters: unknown term '{c}' (expected one of {', '.join(JOINT_TERMS)})")
        out[..., t] = cols[c]()
    return out


def friction_law(joint_params: dict, v) -> np.ndarray:
    """Static friction f(v) (g, n) of each joint at velocities v (g,) (rad/s or m/s): the sum of the
    friction terms among `joint_params` ({code: (n,)}; offset and armature are not friction)."""
    v = np.asarray(v, dtype=float).reshape(-1)
    codes = [c for c in joint_params if c in DRY_FRICTION_TERMS or c == "fv"]
    if not codes:
        n = len(next(iter(joint_params.values()))) if joint_params else 0
        return np.zeros((v.size, n))
    n = np.asarray(joint_params[codes[0]]).size
    V = np.repeat(v[:, None], n, axis=1)
    cols = term_columns(codes, V, np.zeros_like(V))
    return sum(np.asarray(joint_params[c], float) * cols[..., t] for t, c in enumerate(codes))


def coulomb_levels(joint_params: dict, speed: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Dry-friction levels (n,) at high speed in the positive and negative direction: f(+v) - fv v
    and -(f(-v) + fv v) at v = `speed`, where every low-speed shape term has saturated. For the
    textbook model both equal fc."""
    f = friction_law(joint_params, [speed, -speed])
    fv = np.asarray(joint_params.get("fv", 0.0), float)
    return f[0] - fv * speed, -(f[1] + fv * speed)


def joint_term_torque(robot: Robot, dq, ddq, joint_params, dry=None) -> np.ndarray:
    """Per-joint terms (N, n): sum over the given codes of coefficient x column (see :data:`JOINT_TERMS`),
    e.g. fv q' + fc sign(q') + fo + ia q''; `dry` as in :func:`term_columns`."""
    dq, ddq = robot.check_states(dq, ddq, names=("dq", "ddq"))
    jp = check_joint_params(robot, joint_params)
    tau = np.zeros_like(dq)
    if not jp:
        return tau
    codes = list(jp)
    cols = term_columns(codes, dq, ddq, dry)
    for t, c in enumerate(codes):
        tau += jp[c] * cols[..., t]
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


def inverse_dynamics(robot: Robot, q, dq, ddq, inertial=None, joint_params=None, gravity: bool = True, dry=None) -> np.ndarray:
    """Joint torques tau (N, n) for motion (q, q', q'') (rad, rad/s, rad/s^2; m for prismatic), by RNEA plus joint terms.

    `dry` (N, n, 4): optional filtered dry-friction signals (see :func:`term_columns`).
    """
    tau = rnea(robot, q, dq, ddq, inertial, gravity)
    if joint_params:
        tau += joint_term_torque(robot, dq, ddq, joint_params, dry)
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


def point_motion(robot: Robot, Rw: np.ndarray, pw: np.ndarray, frame: str, point=None) -> tuple[np.ndarray, np.ndarray]:
    """Position x (N, 3) m and linear Jacobian dx/dq (N, 3, n) of `point` (3,) m on link `frame`.

    Takes the body poses Rw (N, n, 3, 3), pw (N, n, 3) of :func:`body_poses`, so several points
    share one kinematics pass: column j is z_j x (x - o_j) for a revolute joint, z_j for a
    prismatic one (z_j, o_j: joint j's axis and origin in the base frame).
    """
    fr = robot.frame(frame)
    pt = np.zeros(3) if point is None else np.asarray(point, dtype=float).reshape(3)
    local_p = fr.p + fr.R @ pt
    N = Rw.shape[0]
    J = np.zeros((N, 3, robot.n))
    if fr.body < 0:
        return np.broadcast_to(local_p, (N, 3)).copy(), J
    x = np.empty((N, 3))
    kernels.point_chunk(np.ascontiguousarray(Rw), np.ascontiguousarray(pw), fr.body, np.ascontiguousarray(local_p),
                        np.ascontiguousarray(robot.ancestors[fr.body]), robot.joint_type, robot.axis, x, J)
    return x, J


def jacobian(robot: Robot, q, frame: str, point=None) -> np.ndarray:
    """Geometric Jacobian (N, 6, n) of `point` on link `frame`: rows [linear velocity; angular velocity] in the base frame."""
    (q,) = robot.check_states(q, names=("q",))
    fr = robot.frame(frame)
    N = q.shape[0]
    J = np.zeros((N, 6, robot.n))
    if fr.body < 0:
        return J
    Rw, pw = body_poses(robot, q)
    J[:, :3] = point_motion(robot, Rw, pw, frame, point)[1]
    for j in np.flatnonzero(robot.ancestors[fr.body]):
        if robot.joint_type[j] == 0:
            J[:, 3:, j] = Rw[:, j] @ robot.axis[j]
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
