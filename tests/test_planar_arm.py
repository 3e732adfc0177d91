"""Two-link planar arm with point masses, and power balance of a simulated 7-joint arm.

The two-link arm moves in the vertical x-z plane under gravity; each link is massless with a
point mass at its far end. Its M(q), c(q, q') and g(q) have the standard closed form of the
two-link planar arm (a trade fact), with q1 measured from the horizontal and q2 relative to link 1.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import PANDA, PANDA_FINGERS_LOCKED, erd_path

import ident

L1, L2, M1, M2, G = 0.45, 0.35, 2.5, 1.2, 9.81

PLANAR_URDF = f"""<?xml version="1.0"?>
<robot name="planar2">
  <link name="ground"/>
  <link name="link1">
    <inertial><origin xyz="{L1} 0 0"/><mass value="{M1}"/>
      <inertia ixx="0" ixy="0" ixz="0" iyy="0" iyz="0" izz="0"/></inertial>
  </link>
  <link name="link2">
    <inertial><origin xyz="{L2} 0 0"/><mass value="{M2}"/>
      <inertia ixx="0" ixy="0" ixz="0" iyy="0" iyz="0" izz="0"/></inertial>
  </link>
  <link name="tip"/>
  <!-- rotation about -y turns +x towards +z: q = 0 is horizontal, q > 0 lifts the link -->
  <joint name="shoulder" type="continuous">
    <parent link="ground"/><child link="link1"/><axis xyz="0 -1 0"/>
  </joint>
  <joint name="elbow" type="continuous">
    <parent link="link1"/><child link="link2"/><origin xyz="{L1} 0 0"/><axis xyz="0 -1 0"/>
  </joint>
  <joint name="tip_fixed" type="fixed">
    <parent link="link2"/><child link="tip"/><origin xyz="{L2} 0 0"/>
  </joint>
</robot>
"""


@pytest.fixture(scope="module")
def planar(tmp_path_factory) -> ident.Robot:
    path = tmp_path_factory.mktemp("planar") / "planar2.urdf"
    path.write_text(PLANAR_URDF)
    return ident.load_robot(path)


def closed_form(q, dq):
    """Standard closed form of the two-link planar arm (a trade fact): M (N,2,2), c (N,2), g (N,2)."""
    c2, s2 = np.cos(q[:, 1]), np.sin(q[:, 1])
    c1, c12 = np.cos(q[:, 0]), np.cos(q[:, 0] + q[:, 1])
    M = np.empty((q.shape[0], 2, 2))
    M[:, 0, 0] = M1 * L1**2 + M2 * (L1**2 + 2 * L1 * L2 * c2 + L2**2)
    M[:, 0, 1] = M[:, 1, 0] = M2 * (L1 * L2 * c2 + L2**2)
    M[:, 1, 1] = M2 * L2**2
    h = M2 * L1 * L2 * s2
    c = np.stack([-h * (2 * dq[:, 0] * dq[:, 1] + dq[:, 1] ** 2), h * dq[:, 0] ** 2], axis=1)
    g = np.stack([(M1 + M2) * G * L1 * c1 + M2 * G * L2 * c12, M2 * G * L2 * c12], axis=1)
    return M, c, g


def test_planar_terms_equal_closed_form(planar):
    rng = np.random.default_rng(0)
    q = rng.uniform(-np.pi, np.pi, (300, 2))
    dq = rng.uniform(-3, 3, (300, 2))
    ddq = rng.uniform(-10, 10, (300, 2))
    M, c, g = closed_form(q, dq)
    np.testing.assert_allclose(ident.mass_matrix(planar, q), M, rtol=0, atol=1e-12)
    np.testing.assert_allclose(ident.velocity_torque(planar, q, dq), c, rtol=0, atol=1e-12)
    np.testing.assert_allclose(ident.gravity_torque(planar, q), g, rtol=0, atol=1e-12)
    tau = np.einsum("nij,nj->ni", M, ddq) + c + g
    np.testing.assert_allclose(ident.inverse_dynamics(planar, q, dq, ddq), tau, rtol=0, atol=1e-12)
    # the regressor with the description's parameters gives the same torque
    np.testing.assert_allclose(ident.predict(planar, q, dq, ddq, planar.prior_vector()), tau, rtol=0, atol=1e-11)


def test_planar_kinematics_and_energy(planar):
    rng = np.random.default_rng(1)
    q = rng.uniform(-np.pi, np.pi, (50, 2))
    dq = rng.uniform(-3, 3, (50, 2))
    # tip of the planar arm: (l1 cos q1 + l2 cos(q1+q2), 0, l1 sin q1 + l2 sin(q1+q2))
    _, tip = ident.frame_pose(planar, q, "tip")
    expect = np.stack([L1 * np.cos(q[:, 0]) + L2 * np.cos(q.sum(1)), np.zeros(50), L1 * np.sin(q[:, 0]) + L2 * np.sin(q.sum(1))], 1)
    np.testing.assert_allclose(tip, expect, atol=1e-14)
    kin, pot = ident.energy(planar, q, dq)
    M, _, _ = closed_form(q, dq)
    np.testing.assert_allclose(kin, 0.5 * np.einsum("ni,nij,nj->n", dq, M, dq), atol=1e-12)
    np.testing.assert_allclose(pot, G * (M1 * L1 * np.sin(q[:, 0]) + M2 * expect[:, 2]), atol=1e-12)


def test_power_balance_of_simulated_panda():
    # Work-energy theorem: without friction, d/dt (kinetic + potential) = tau . q'.
    # Simulate with RK4 under a known smooth torque and compare the energy change with the work
    # done (Simpson's rule on the same grid); both errors shrink like dt^4.
    robot = ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)
    n = robot.n
    rng = np.random.default_rng(4)
    amp, freq, phase = rng.uniform(1.0, 4.0, n), rng.uniform(0.5, 2.0, n), rng.uniform(0, 2 * np.pi, n)
    hold = ident.gravity_torque(robot, np.zeros(n))[0]  # keeps the arm from simply falling

    def torque(t):
        return hold + amp * np.sin(2 * np.pi * freq * t + phase)

    def deriv(t, x):
        q, dq = x[:n], x[n:]
        return np.concatenate([dq, ident.forward_dynamics(robot, q, dq, torque(t))[0]])

    dt, steps = 2e-3, 250
    x = np.concatenate([np.zeros(n), rng.uniform(-0.5, 0.5, n)])
    ts = np.arange(steps + 1) * dt
    xs = [x]
    for t in ts[:-1]:
        k1 = deriv(t, x)
        k2 = deriv(t + dt / 2, x + dt / 2 * k1)
        k3 = deriv(t + dt / 2, x + dt / 2 * k2)
        k4 = deriv(t + dt, x + dt * k3)
        x = x + dt / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        xs.append(x)
    xs = np.array(xs)
    kin, pot = ident.energy(robot, xs[:, :n], xs[:, n:])
    energy = kin + pot
    power = np.einsum("ni,ni->n", np.array([torque(t) for t in ts]), xs[:, n:])
    work = dt / 3 * (power[0] + power[-1] + 4 * power[1:-1:2].sum() + 2 * power[2:-1:2].sum())
    change = energy[-1] - energy[0]
    assert abs(change) > 0.05  # the test is only meaningful if the energy does change
    assert abs(change - work) < 1e-6 * max(1.0, abs(work))
    # pointwise: central difference of the energy against the power
    dE = (energy[2:] - energy[:-2]) / (2 * dt)
    np.testing.assert_allclose(dE, power[1:-1], atol=1e-3 * np.abs(power).max())
