"""Dynamics, regressor and kinematics against the reference library pin (pinocchio).

Every check below compares ident with pin on URDFs shipped by the `example-robot-data` package,
at 200 random states per description, to 1e-9 relative:

* ur5: 6-joint industrial arm;
* panda: 7-joint arm, both fingers locked (finger_joint2 is a mimic joint);
* romeo left arm: the trunk yaw, the seven arm joints and the hand joint, whose axis
  (0.121869, -0.992546, -4.4e-8) is not aligned with a frame axis; every other joint is locked
  at 0 (no description in the package has an oblique axis on a plain arm, this is the closest);
* baxter branches: head pan, the left arm, one right-arm joint and the left gripper's prismatic
  finger, with the mimic finger and the rest of the right arm locked at non-zero positions, so
  three branches, a prismatic joint and locked joints merged into their parents.

pin locks the same joints at the same values with ``pin.buildReducedModel``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident
from ident.arm.base import random_states

pin = pytest.importorskip("pinocchio")

ROMEO = "romeo_description/urdf/romeo.urdf"
ROMEO_ARM = ["TrunkYaw", "LShoulderPitch", "LShoulderYaw", "LElbowRoll", "LElbowYaw", "LWristRoll", "LWristYaw", "LWristPitch", "LHand"]
BAXTER = "baxter_description/urdf/baxter.urdf"
BAXTER_JOINTS = ["head_pan", "left_s0", "left_s1", "left_e0", "left_e1", "left_w0", "left_w1", "left_w2", "right_s0", "l_gripper_l_finger_joint"]
BAXTER_LOCKED = {"l_gripper_r_finger_joint": -0.01, "right_s1": 0.4, "right_e1": 1.1, "right_w1": -0.7}

# pin orders a body's dynamic parameters [m, mx, my, mz, Ixx, Ixy, Iyy, Ixz, Iyz, Izz]
# (pin documentation of Inertia.toDynamicParameters); ours put Ixz before Iyy.
PIN_TO_OURS = np.array([0, 1, 2, 3, 4, 5, 7, 6, 8, 9])
N_STATES = 200
RTOL = 1e-9


@dataclass
class Pair:
    robot: ident.Robot
    model: object
    data: object
    joint_ids: list  # pin joint id of each of our joints

    def q(self, q: np.ndarray) -> np.ndarray:
        """Our joint positions (n,) -> pin configuration (continuous joints take cos, sin)."""
        out = pin.neutral(self.model)
        for k, jid in enumerate(self.joint_ids):
            j = self.model.joints[jid]
            if j.nq == 2:
                out[j.idx_q : j.idx_q + 2] = np.cos(q[k]), np.sin(q[k])
            else:
                out[j.idx_q] = q[k]
        return out

    def v(self, v: np.ndarray) -> np.ndarray:
        out = np.zeros(self.model.nv)
        out[self.vidx] = v
        return out

    @property
    def vidx(self) -> np.ndarray:
        return np.array([self.model.joints[j].idx_v for j in self.joint_ids])


def make_pair(rel: str, joints=None, locked=None) -> Pair:
    path = erd_path(rel)
    robot = ident.load_robot(path, joints=joints, locked=locked)
    full = pin.buildModelFromUrdf(str(path))
    # lock every joint we do not identify, at the same value
    keep = set(robot.joint_names)
    q_ref = pin.neutral(full)
    lock_ids = []
    for jid in range(1, full.njoints):
        name = full.names[jid]
        if name in keep:
            continue
        lock_ids.append(jid)
        val = robot.locked.get(name, 0.0)
        j = full.joints[jid]
        if j.nq == 2:
            q_ref[j.idx_q : j.idx_q + 2] = np.cos(val), np.sin(val)
        else:
            q_ref[j.idx_q] = val
    model = pin.buildReducedModel(full, lock_ids, q_ref) if lock_ids else full
    ids = [model.getJointId(n) for n in robot.joint_names]
    assert model.nv == robot.n
    return Pair(robot, model, model.createData(), ids)


CASES = {
    "ur5": (UR5, None, None),
    "panda": (PANDA, None, PANDA_FINGERS_LOCKED),
    "romeo_arm": (ROMEO, ROMEO_ARM, None),
    "baxter_branches": (BAXTER, BAXTER_JOINTS, BAXTER_LOCKED),
}


@pytest.fixture(scope="module", params=list(CASES))
def pair(request) -> Pair:
    rel, joints, locked = CASES[request.param]
    return make_pair(rel, joints, locked)


def states(robot: ident.Robot, seed: int = 7):
    return random_states(robot, N_STATES, np.random.default_rng(seed))


def assert_close(ours, ref, what):
    scale = max(1.0, float(np.abs(ref).max()))
    err = float(np.abs(np.asarray(ours) - np.asarray(ref)).max())
    assert err <= RTOL * scale, f"{what}: max error {err:.3e} against pin (scale {scale:.3e})"


def test_structure_matches(pair):
    # pin reference: same joint kinds, same tree (parent of each identified joint)
    r, m = pair.robot, pair.model
    for k, jid in enumerate(pair.joint_ids):
        parent_jid = m.parents[jid]
        expected = -1 if parent_jid == 0 else pair.joint_ids.index(parent_jid)
        assert r.parent[k] == expected, r.joint_names[k]
        assert (r.joint_type[k] == 1) == m.joints[jid].shortname().startswith("JointModelP")


def test_limits_match_pin(pair):
    # pin reads the same <limit> elements (position limits by q index, velocity and effort by v index)
    r, m = pair.robot, pair.model
    for k, jid in enumerate(pair.joint_ids):
        j = m.joints[jid]
        # a velocity or effort of 0 in the file (romeo's hand) means "not given" to ident: no limit
        for ours, ref in ((r.velocity_limit[k], m.velocityLimit[j.idx_v]), (r.effort_limit[k], m.effortLimit[j.idx_v])):
            assert ours == (pytest.approx(ref, rel=1e-12) if ref > 0 else np.inf), r.joint_names[k]
        if j.nq == 1:  # a continuous joint (nq 2 in pin) has no position limits
            assert r.lower[k] == pytest.approx(m.lowerPositionLimit[j.idx_q], rel=1e-12), r.joint_names[k]
            assert r.upper[k] == pytest.approx(m.upperPositionLimit[j.idx_q], rel=1e-12), r.joint_names[k]
        else:
            assert not np.isfinite(r.lower[k]) and not np.isfinite(r.upper[k])


def test_body_inertia_after_merging_matches_pin(pair):
    # pin merges bodies on fixed (and locked) joints into the joint's body, in the joint frame,
    # which is our body frame: the 10-vectors must agree.
    for k, jid in enumerate(pair.joint_ids):
        ref = pair.model.inertias[jid].toDynamicParameters()[PIN_TO_OURS]
        assert_close(pair.robot.prior[k], ref, f"body {pair.robot.body_names[k]}")


def test_inverse_dynamics_mass_matrix_gravity(pair):
    r = pair.robot
    q, dq, ddq = states(r)
    tau = ident.inverse_dynamics(r, q, dq, ddq)
    M = ident.mass_matrix(r, q)
    g = ident.gravity_torque(r, q)
    c = ident.velocity_torque(r, q, dq)
    vi = pair.vidx
    for s in range(N_STATES):
        qp, vp, ap = pair.q(q[s]), pair.v(dq[s]), pair.v(ddq[s])
        ref_tau = pin.rnea(pair.model, pair.data, qp, vp, ap)[vi]
        assert_close(tau[s], ref_tau, f"RNEA state {s}")
        Mp = pin.crba(pair.model, pair.data, qp)
        Mp = np.triu(Mp) + np.triu(Mp, 1).T
        assert_close(M[s], Mp[np.ix_(vi, vi)], f"CRBA state {s}")
        assert_close(g[s], pin.computeGeneralizedGravity(pair.model, pair.data, qp)[vi], f"gravity state {s}")
        ref_c = pin.rnea(pair.model, pair.data, qp, vp, np.zeros(r.n)) - pin.computeGeneralizedGravity(pair.model, pair.data, qp)
        assert_close(c[s], ref_c[vi], f"velocity torque state {s}")


def test_regressor_matches_pin_regressor(pair):
    # pin.computeJointTorqueRegressor: same per-body parameters in the same frames, so the
    # columns must agree one by one after reordering.
    r = pair.robot
    q, dq, ddq = states(r, seed=11)
    Y = ident.regressor(r, q[:40], dq[:40], ddq[:40])
    vi = pair.vidx
    for s in range(40):
        Yp = pin.computeJointTorqueRegressor(pair.model, pair.data, pair.q(q[s]), pair.v(dq[s]), pair.v(ddq[s]))
        for k, jid in enumerate(pair.joint_ids):
            cols = 10 * (jid - 1) + PIN_TO_OURS
            assert_close(Y[s][:, 10 * k : 10 * k + 10], Yp[np.ix_(vi, cols)], f"regressor block {r.body_names[k]} state {s}")


def test_forward_dynamics_matches_aba(pair):
    r = pair.robot
    q, dq, ddq = states(r, seed=3)
    tau = np.random.default_rng(5).normal(0.0, 5.0, q.shape)
    if np.linalg.cond(ident.mass_matrix(r, q[:1])[0]) > 1e12:
        # romeo's hand link carries no mass: M is singular, and ident must say so, not return garbage
        with pytest.raises(ident.IdentError, match="mass matrix is singular"):
            ident.forward_dynamics(r, q, dq, tau)
        return
    acc = ident.forward_dynamics(r, q, dq, tau)
    vi = pair.vidx
    for s in range(N_STATES):
        ref = pin.aba(pair.model, pair.data, pair.q(q[s]), pair.v(dq[s]), pair.v(tau[s]))[vi]
        # accelerations of light distal bodies are large: compare relative to their own scale
        assert_close(acc[s], ref, f"ABA state {s}")


def test_forward_dynamics_with_friction_and_armature(pair):
    # q'' = (M + diag(ia))^-1 (tau - c - g - fv q' - fc sign(q') - fo), with M from pin.crba and
    # c + g from pin.rnea at zero acceleration (reference library); armature also makes romeo's
    # massless hand regular.
    r = pair.robot
    rng = np.random.default_rng(31)
    q, dq, _ = states(r, seed=29)
    q, dq = q[:50], dq[:50]
    dq[::5, 0] = 0.0  # sign(0) = 0: no Coulomb torque at rest
    tau = rng.normal(0.0, 5.0, q.shape)
    jp = {"fv": rng.uniform(0.1, 1.0, r.n), "fc": rng.uniform(0.1, 2.0, r.n), "fo": rng.normal(0.0, 0.3, r.n), "ia": rng.uniform(0.01, 0.1, r.n)}
    acc = ident.forward_dynamics(r, q, dq, tau, joint_params=jp)
    vi = pair.vidx
    for s in range(q.shape[0]):
        qp = pair.q(q[s])
        Mp = pin.crba(pair.model, pair.data, qp)
        Mp = (np.triu(Mp) + np.triu(Mp, 1).T)[np.ix_(vi, vi)] + np.diag(jp["ia"])
        bias = pin.rnea(pair.model, pair.data, qp, pair.v(dq[s]), np.zeros(pair.model.nv))[vi]
        friction = jp["fv"] * dq[s] + jp["fc"] * np.sign(dq[s]) + jp["fo"]
        ref = np.linalg.solve(Mp, tau[s] - bias - friction)
        assert_close(acc[s], ref, f"forward dynamics with joint terms, state {s}")
    # and inverse dynamics with the same joint terms gives the torque back
    assert_close(ident.inverse_dynamics(r, q, dq, acc, joint_params=jp), tau, "inverse(forward(tau))")


def test_jacobian_and_wrench_torque_match_pin(pair):
    r = pair.robot
    q, _, _ = states(r, seed=9)
    q = q[:50]
    leaf = r.n - 1  # the last body is a leaf in every case
    frame = r.body_names[leaf]
    point = np.array([0.03, -0.02, 0.05])
    J = ident.jacobian(r, q, frame, point)
    F = np.random.default_rng(2).normal(0.0, 10.0, (q.shape[0], 6))
    tau = ident.wrench_torque(r, q, frame, F, point)
    fid = pair.model.addFrame(
        pin.Frame("probe", pair.joint_ids[leaf], 0, pin.SE3(np.eye(3), point), pin.FrameType.OP_FRAME)
    )
    data = pair.model.createData()
    vi = pair.vidx
    for s in range(q.shape[0]):
        Jp = pin.computeFrameJacobian(pair.model, data, pair.q(q[s]), fid, pin.LOCAL_WORLD_ALIGNED)[:, vi]
        assert_close(J[s], Jp, f"Jacobian state {s}")
        assert_close(tau[s], Jp.T @ F[s], f"J^T F state {s}")


def test_regressor_times_prior_is_rnea_and_gives_crba(pair):
    # Y pi = RNEA; with q' = 0, no gravity and q'' = e_i, column i of M equals Y(q, 0, e_i) pi
    # (the unit-acceleration construction of M, Walker and Orin 1982); ident's CRBA is itself
    # checked against pin.crba above.
    r = pair.robot
    q, dq, ddq = states(r, seed=13)
    pi = r.prior.reshape(-1)
    assert_close(ident.predict(r, q, dq, ddq, pi), ident.inverse_dynamics(r, q, dq, ddq), "Y pi vs RNEA")
    r0 = ident.load_robot(r.source, joints=r.joint_names, locked=r.locked, gravity=[0.0, 0.0, 0.0])
    qs = np.repeat(q[:20], r.n, axis=0)
    E = np.tile(np.eye(r.n), (20, 1))
    cols = ident.predict(r0, qs, np.zeros_like(qs), E, pi).reshape(20, r.n, r.n)
    assert_close(np.swapaxes(cols, 1, 2), ident.mass_matrix(r, q[:20]), "M from the regressor vs CRBA")


def random_physical(n: int, rng) -> np.ndarray:
    """(n, 10) physically consistent bodies: mass, COM and a positive-definite inertia at the COM."""
    out = np.empty((n, 10))
    for k in range(n):
        A = rng.normal(size=(3, 3))
        Q, _ = np.linalg.qr(A)
        ev = np.sort(rng.uniform(0.01, 0.1, 3))
        ev[2] = min(ev[2], 0.9 * (ev[0] + ev[1]))  # triangle inequality
        out[k] = ident.to_vector(rng.uniform(0.5, 3.0), rng.normal(0.0, 0.1, 3), Q @ np.diag(ev) @ Q.T)
    return out


def model_with(pair: Pair, params: np.ndarray):
    """pin's model of the pair with our bodies `params` (n, 10) in place of the description's, and its data."""
    model = pair.model.copy()
    for k, jid in enumerate(pair.joint_ids):
        model.inertias[jid] = pin.Inertia.FromDynamicParameters(params[k][np.argsort(PIN_TO_OURS)])
    return model, model.createData()


def test_inverse_dynamics_with_other_parameters(pair):
    # Random physical bodies instead of the description's: exercises every axis, including the
    # massless romeo hand body on its oblique axis. pin takes the same bodies through model.inertias.
    r = pair.robot
    rng = np.random.default_rng(17)
    params = random_physical(r.n, rng)
    model, data = model_with(pair, params)
    q, dq, ddq = states(r, seed=19)
    tau = ident.inverse_dynamics(r, q, dq, ddq, inertial=params)
    M = ident.mass_matrix(r, q, inertial=params)
    acc = ident.forward_dynamics(r, q, dq, tau, inertial=params)
    vi = pair.vidx
    for s in range(N_STATES):
        qp = pair.q(q[s])
        assert_close(tau[s], pin.rnea(model, data, qp, pair.v(dq[s]), pair.v(ddq[s]))[vi], f"RNEA state {s}")
        Mp = pin.crba(model, data, qp)
        Mp = np.triu(Mp) + np.triu(Mp, 1).T
        assert_close(M[s], Mp[np.ix_(vi, vi)], f"CRBA state {s}")
    # forward dynamics undoes inverse dynamics (pin.aba checks the same above)
    assert_close(acc, ddq, "forward(inverse(q''))")


def test_streamed_and_threaded_regressor_equal_the_full_one():
    # Chunks of any size, the serial and the threaded kernel must all give the same regressor.
    from ident.arm import kernels
    from ident.arm.model import kernel_arrays
    from ident.arm.regressor import _term_codes, iter_regressor

    pair = make_pair(*CASES["baxter_branches"])
    r = pair.robot
    q, dq, ddq = random_states(r, 1500, np.random.default_rng(23))
    dq[::7, 3] = 0.0  # sign(0) = 0 in the Coulomb column
    Y = ident.regressor(r, q, dq, ddq, "all")
    for chunk in (1, 97, 1024):
        got = np.empty_like(Y)
        for sl, Yc in iter_regressor(r, q, dq, ddq, "all", chunk=chunk):
            assert Yc.shape[0] <= chunk
            got[sl] = Yc
        np.testing.assert_array_equal(got, Y)
    # the streaming form hands each chunk of one reused buffer to a consumer
    seen, buffers = [], set()

    def consumer(sl, Yc):
        buffers.add(Yc.__array_interface__["data"][0])
        seen.append((sl, Yc.sum(axis=0)))

    ident.stream_regressor(r, q, dq, ddq, consumer, "all", chunk=200)
    assert [sl.start for sl, _ in seen] == list(range(0, 1500, 200)) and len(buffers) == 1
    for sl, total in seen:
        np.testing.assert_allclose(total, Y[sl].sum(axis=0), rtol=0, atol=1e-9 * np.abs(Y).max())
    args = (q, dq, ddq, *kernel_arrays(r), r.ancestors, -r.gravity, _term_codes("all"))
    serial, threaded = np.full_like(Y, np.nan), np.full_like(Y, np.nan)
    kernels._regressor_serial(*args, serial)
    kernels._regressor_parallel(*args, threaded)
    np.testing.assert_array_equal(serial, Y)
    np.testing.assert_array_equal(threaded, Y)
    # the joint-term columns on the joint's own row only: fv q', fc sign(q'), fo 1, ia q'',
    # fcp [q' > 0], fcn -[q' < 0], fl1..fl3 tanh(q' / s_k) (the definitions in ident.arm.model)
    p0 = 10 * r.n
    k = len(ident.parse_terms("all"))
    block = Y[:, :, p0:].reshape(len(q), r.n, r.n, k)
    for j in range(r.n):
        v = dq[:, j]
        expect = [v, np.sign(v), np.ones(len(q)), ddq[:, j], (v > 0).astype(float), -(v < 0).astype(float)]
        expect += [np.tanh(v / sc) for sc in ident.arm.model.LOW_SPEED_SCALES]
        np.testing.assert_allclose(block[:, j, j], np.stack(expect, 1), rtol=1e-15, atol=0)
        others = np.delete(block[:, j], j, axis=1)
        assert not others.any()
    # and with the description's parameters plus joint terms, Y pi is the full inverse dynamics
    jp = {"fv": np.full(r.n, 0.3), "fc": np.full(r.n, 0.8), "fo": np.full(r.n, -0.1), "ia": np.full(r.n, 0.05),
          "fcp": np.full(r.n, 0.2), "fcn": np.full(r.n, 0.1), "fl1": np.full(r.n, 0.3), "fl2": np.full(r.n, -0.2), "fl3": np.full(r.n, 0.05)}
    codes = ident.parse_terms("all")
    pi = np.concatenate([r.prior.reshape(-1), np.stack([jp[c] for c in codes], 1).reshape(-1)])
    assert_close(ident.predict(r, q, dq, ddq, pi, "all"), ident.inverse_dynamics(r, q, dq, ddq, joint_params=jp), "Y pi with joint terms")


def _regressor_sum(args):
    robot, q, dq, ddq = args
    from ident.arm import kernels

    kernels.set_threading("on")  # refused in a forked child: stays on one thread
    return float(ident.regressor(robot, q, dq, ddq).sum())


def test_forked_children_compute_the_regressor_after_threaded_use():
    # numba's OpenMP pool does not survive fork(); ident keeps forked children on one thread.
    import multiprocessing as mp

    from ident.arm import kernels

    pair = make_pair(*CASES["panda"])
    q, dq, ddq = random_states(pair.robot, 1200, np.random.default_rng(29))
    previous = kernels.set_threading("on")
    try:
        total = float(ident.regressor(pair.robot, q, dq, ddq).sum())  # the parent uses threads
        with mp.get_context("fork").Pool(1) as pool:
            assert pool.apply_async(_regressor_sum, ((pair.robot, q, dq, ddq),)).get(timeout=120) == total
    finally:
        kernels.set_threading(previous)


def test_bad_states_and_parameters_are_refused_naming_the_argument():
    r = ident.load_robot(erd_path(UR5))
    q = np.zeros((3, 6))
    bad = q.copy()
    bad[1, 2] = np.nan
    with pytest.raises(ident.IdentError, match=r"^q: non-finite value at sample 1, joint elbow_joint$"):
        ident.regressor(r, bad, q, q)
    with pytest.raises(ident.IdentError, match=r"^ddq: non-finite value at sample 1, joint elbow_joint$"):
        ident.inverse_dynamics(r, q, q, bad)
    with pytest.raises(ident.IdentError, match=r"^q: expected shape \(N, 6\) for the joints of ur5, got \(3, 5\)$"):
        ident.mass_matrix(r, np.zeros((3, 5)))
    with pytest.raises(ident.IdentError, match=r"joint parameters 'fv': expected 6 finite values, got 5"):
        ident.forward_dynamics(r, q, q, q, joint_params={"fv": np.ones(5)})
    with pytest.raises(ident.IdentError, match=r"no link or frame named 'nolink'"):
        ident.jacobian(r, q, "nolink")
    with pytest.raises(ident.IdentError, match=r"parameters: expected 60 values"):
        ident.predict(r, q, q, q, np.ones(59))


def test_contraction_gradient_matches_pin_rnea_derivatives(pair):
    # With weights G_j = u_j pi (one physical parameter vector pi, one weight u_j a joint), the
    # contraction sum_jp Y_jp G_jp is u . tau(pi), so its exact state derivatives are u^T of
    # pin.computeRNEADerivatives (analytic derivatives of the same inverse dynamics).
    from ident.arm.contraction import contraction_gradient

    r = pair.robot
    rng = np.random.default_rng(23)
    params = random_physical(r.n, rng)
    model, data = model_with(pair, params)
    q, dq, ddq = states(r, seed=29)
    q, dq, ddq = q[:30], dq[:30], ddq[:30]
    u = rng.normal(size=(30, r.n))
    G = u[:, :, None] * params.reshape(1, 1, -1)
    F, gq, gdq, gddq = contraction_gradient(r, q, dq, ddq, G)
    vi = pair.vidx
    for s in range(30):
        dtq, dtv, dta = pin.computeRNEADerivatives(model, data, pair.q(q[s]), pair.v(dq[s]), pair.v(ddq[s]))
        tau = pin.rnea(model, data, pair.q(q[s]), pair.v(dq[s]), pair.v(ddq[s]))[vi]
        assert_close(F[s], u[s] @ tau, f"contraction state {s}")
        assert_close(gq[s], u[s] @ dtq[np.ix_(vi, vi)], f"d/dq state {s}")
        assert_close(gdq[s], u[s] @ dtv[np.ix_(vi, vi)], f"d/dq' state {s}")
        assert_close(gddq[s], u[s] @ np.triu(dta)[np.ix_(vi, vi)] + u[s] @ np.triu(dta, 1).T[np.ix_(vi, vi)], f"d/dq'' state {s}")
