"""Payload identification on an identified arm.

Reference torques come from pinocchio's RNEA (`pin.rnea`) on the panda URDF with the fingers
locked (`pin.buildReducedModel`) and the payload added to the last joint's body inertia with
pinocchio's own `Inertia` arithmetic.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pinocchio as pin
import pytest
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path
from test_estimate import sine_trajectory

import ident
from ident.arm.parameters import parameter_set_from_vector
from ident.cli import main
from ident.errors import DataError, IdentError
from ident.estimation.payload import identify_payload, load_payload
from ident.handover.paramfile import save_parameters

# Invented demo payload: a 1.5 kg gripper-and-part, COM ahead of the flange.
PAYLOAD_MASS = 1.5
PAYLOAD_COM = np.array([0.02, -0.01, 0.2])  # m, in the last link's frame
PAYLOAD_INERTIA = np.diag([4e-3, 5e-3, 2e-3])  # kg m^2 about the COM
FRICTION = {"fv": np.full(7, 0.6), "fc": np.full(7, 0.4)}


@pytest.fixture(scope="module")
def panda_case():
    urdf = erd_path(PANDA)
    robot = ident.load_robot(urdf, locked=PANDA_FINGERS_LOCKED)
    full = pin.buildModelFromUrdf(str(urdf))
    q0 = pin.neutral(full)
    locked = []
    for name, val in PANDA_FINGERS_LOCKED.items():
        jid = full.getJointId(name)
        q0[full.joints[jid].idx_q] = val
        locked.append(jid)
    model = pin.buildReducedModel(full, locked, q0)
    assert [model.names[i] for i in range(1, model.njoints)] == robot.joint_names
    arm = parameter_set_from_vector(
        robot, np.concatenate([robot.prior.reshape(-1), np.column_stack([FRICTION["fv"], FRICTION["fc"]]).reshape(-1)]), ("fv", "fc")
    )
    return robot, model, arm


def _torque(model, q, dq, ddq, payload: bool, rng, noise):
    m = model.copy()
    if payload:
        m.inertias[7] = m.inertias[7] + pin.Inertia(PAYLOAD_MASS, PAYLOAD_COM, PAYLOAD_INERTIA)
    data = m.createData()
    tau = np.array([pin.rnea(m, data, q[k], dq[k], ddq[k]) for k in range(q.shape[0])])
    tau += FRICTION["fv"] * dq + FRICTION["fc"] * np.sign(dq)
    return tau + noise * rng.standard_normal(tau.shape)


def test_payload_recovered_from_noisy_data(panda_case):
    # Issue requirement: 1.5 kg recovered within 2 % in mass and 5 mm in COM from noisy data.
    robot, model, arm = panda_case
    rng = np.random.default_rng(21)
    q, dq, ddq = sine_trajectory(robot, 2000, rng, amplitude=0.6, dt=0.01)
    tau = _torque(model, q, dq, ddq, True, rng, noise=0.05)
    res = identify_payload(robot, arm, (q, dq, ddq, tau))
    assert abs(res.mass - PAYLOAD_MASS) <= 0.02 * PAYLOAD_MASS
    assert np.linalg.norm(res.com - PAYLOAD_COM) <= 0.005
    assert res.body == robot.body_names[-1] and res.significant()
    # Consistent by construction: pseudo-inertia positive semidefinite.
    assert np.linalg.eigvalsh(ident.pseudo_inertia(res.params))[0] >= -1e-9
    # The residual drops to the noise level once the payload is accounted for.
    assert np.all(res.residual_rms_after < 0.06)
    assert res.residual_rms_before.max() > 1.0


def test_zero_payload_check(panda_case):
    # A log without a payload: the mass is zero within its uncertainty.
    robot, model, arm = panda_case
    rng = np.random.default_rng(22)
    q, dq, ddq = sine_trajectory(robot, 1500, rng, amplitude=0.6, dt=0.01)
    tau = _torque(model, q, dq, ddq, False, rng, noise=0.05)
    res = identify_payload(robot, arm, (q, dq, ddq, tau))
    assert abs(res.params_ls[0]) < 3 * res.mass_std
    assert not res.significant()
    assert 0 <= res.mass < 0.01
    assert "no payload detected" in res.summary()
    # Noise makes the unconstrained zero payload non-physical here: the SDP step gave the result,
    # and it is physical exactly, not only to the solver's tolerance (pseudo-inertia PSD, Wensing,
    # Kim and Slotine 2017).
    assert res.solver["stage"] == "SDP" and res.warnings
    assert np.linalg.eigvalsh(ident.pseudo_inertia(res.params))[0] >= -1e-12 * max(res.mass, 1e-300)


def test_payload_in_a_named_frame(panda_case):
    robot, model, arm = panda_case
    rng = np.random.default_rng(23)
    q, dq, ddq = sine_trajectory(robot, 1500, rng, amplitude=0.6, dt=0.01)
    tau = _torque(model, q, dq, ddq, True, rng, noise=0.0)
    body = identify_payload(robot, arm, (q, dq, ddq, tau))
    hand = identify_payload(robot, arm, (q, dq, ddq, tau), frame="panda_hand")
    fr = robot.frame("panda_hand")
    assert hand.frame == "panda_hand"
    np.testing.assert_allclose(hand.com, fr.R.T @ (body.com - fr.p), atol=1e-9)
    np.testing.assert_allclose(hand.inertia_com, fr.R.T @ body.inertia_com @ fr.R, atol=1e-9)
    assert hand.mass == pytest.approx(body.mass)
    # Noiseless: exact recovery of every payload quantity (pinocchio reference torques).
    np.testing.assert_allclose(body.com, PAYLOAD_COM, atol=1e-7)
    np.testing.assert_allclose(body.inertia_com, PAYLOAD_INERTIA, atol=1e-7)


def test_payload_errors(panda_case):
    robot, model, arm = panda_case
    rng = np.random.default_rng(24)
    q, dq, ddq = sine_trajectory(robot, 200, rng)
    tau = _torque(model, q, dq, ddq, True, rng, noise=0.0)
    ur5 = ident.load_robot(erd_path(UR5))
    with pytest.raises(DataError, match="does not belong to this robot"):
        identify_payload(ur5, arm, (q[:, :6], dq[:, :6], ddq[:, :6], tau[:, :6]))
    with pytest.raises(IdentError, match="'gripper' is not a body"):
        identify_payload(robot, arm, (q, dq, ddq, tau), body="gripper")
    with pytest.raises(IdentError, match="not fixed to body"):
        identify_payload(robot, arm, (q, dq, ddq, tau), frame="panda_link3")
    bad = tau.copy()
    bad[3, 1] = np.inf
    with pytest.raises(DataError, match="tau.*sample 3"):
        identify_payload(robot, arm, (q, dq, ddq, bad))


def _write_log(path, robot, q, dq, ddq, tau, dt=0.01):
    cols = {"time": np.arange(q.shape[0]) * dt}
    for j, name in enumerate(robot.joint_names):
        cols[f"{name}.q"] = q[:, j]
        cols[f"{name}.dq"] = dq[:, j]
        cols[f"{name}.ddq"] = ddq[:, j]
        cols[f"{name}.tau"] = tau[:, j]
    pd.DataFrame(cols).to_csv(path, index=False, float_format="%.12g")


def test_payload_cli(panda_case, tmp_path, capsys):
    robot, model, arm = panda_case
    rng = np.random.default_rng(25)
    q, dq, ddq = sine_trajectory(robot, 1500, rng, amplitude=0.6, dt=0.01)
    tau = _torque(model, q, dq, ddq, True, rng, noise=0.02)
    log = tmp_path / "gripper.csv"
    _write_log(log, robot, q, dq, ddq, tau)
    params = tmp_path / "arm.yaml"
    save_parameters(params, arm)
    out = tmp_path / "payload.yaml"
    urdf = str(erd_path(PANDA))
    lock = "--lock=panda_finger_joint1=0.02,panda_finger_joint2=0.02"
    common = [lock, "--logged-velocity", "--logged-acceleration", "--cutoff", "0", "--trim", "0", "--slow-velocity", "0"]
    cmd = [sys.executable, "-m", "ident", "payload", urdf, str(params), str(log), "--out", str(out), *common]
    run = subprocess.run(cmd, capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert "mass" in run.stdout
    got = load_payload(out)
    assert got["mass"] == pytest.approx(PAYLOAD_MASS, rel=0.02)
    assert np.linalg.norm(got["com"] - PAYLOAD_COM) < 0.005
    # Parameters of another arm: one line, exit status 2, no output file.
    other = tmp_path / "ur5.yaml"
    ur5 = ident.load_robot(erd_path(UR5))
    save_parameters(other, parameter_set_from_vector(ur5, ur5.prior.reshape(-1)))
    out2 = tmp_path / "never.yaml"
    assert main(["payload", urdf, str(other), str(log), "--out", str(out2), *common]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "does not belong" in err[0]
    assert not out2.exists()
