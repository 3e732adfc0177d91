"""Held-out validation figures and per-link consistency verdicts, against their textbook definitions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import ident
from ident.arm.parameters import parameter_set_from_vector
from ident.cli import main
from ident.errors import IdentError
from ident.handover.check import link_checks, validate
from ident.handover.paramfile import load_parameters

DEMO = Path(__file__).resolve().parents[1] / "datasets_demo"


@pytest.fixture(scope="module")
def arm():
    robot = ident.load_robot(DEMO / "sprout6.urdf")
    return robot, load_parameters(DEMO / "sprout6_truth.yaml", robot)


def states(robot, N=400, seed=0):
    rng = np.random.default_rng(seed)
    q = rng.uniform(-1, 1, (N, robot.n))
    dq = rng.uniform(0.2, 1.0, (N, robot.n)) * rng.choice([-1, 1], (N, robot.n))
    ddq = rng.normal(size=(N, robot.n))
    return np.arange(N) * 0.01, q, dq, ddq


def test_figures_follow_their_definitions(arm):
    robot, truth = arm
    t, q, dq, ddq = states(robot)
    model = ident.inverse_dynamics(robot, q, dq, ddq, truth.inertial, truth.joint_params)
    rng = np.random.default_rng(1)
    err = rng.normal(size=model.shape) * 0.05
    val = validate(robot, truth, t, q, dq, ddq, model + err)
    meas = model + err
    # RMS, normalized RMS, R^2 = 1 - SS_res / SS_tot and the largest error: the standard definitions (from memory)
    assert np.allclose(val.rms, np.sqrt(np.mean(err**2, axis=0)), rtol=1e-12)
    assert np.allclose(val.nrms_pct, 100 * val.rms / (meas.max(0) - meas.min(0)), rtol=1e-12)
    ss_tot = ((meas - meas.mean(0)) ** 2).sum(0)
    assert np.allclose(val.r2, 1 - (err**2).sum(0) / ss_tot, rtol=1e-12)
    assert np.allclose(val.max_error, np.abs(err).max(0), rtol=1e-12)
    k = np.abs(err).argmax(0)
    assert np.allclose(val.max_error_time, t[k])
    # a perfect model: zero error, R^2 = 1
    exact = validate(robot, truth, t, q, dq, ddq, model)
    assert np.allclose(exact.rms, 0, atol=1e-12) and np.allclose(exact.r2, 1)


def test_slow_samples_left_out_only_with_coulomb_friction(arm):
    robot, truth = arm
    t, q, dq, ddq = states(robot, seed=2)
    tau = ident.inverse_dynamics(robot, q, dq, ddq, truth.inertial, truth.joint_params)
    slow = np.zeros_like(q, dtype=bool)
    slow[:50, 0] = True
    tau[:50, 0] += 10.0  # where the joint is stuck the model cannot say the friction
    val = validate(robot, truth, t, q, dq, ddq, tau, slow)
    assert val.samples[0] == 350 and np.allclose(val.rms[0], 0, atol=1e-12)
    no_fc = parameter_set_from_vector(robot, truth.inertial.ravel())
    val2 = validate(robot, no_fc, t, q, dq, ddq, ident.inverse_dynamics(robot, q, dq, ddq, truth.inertial), slow)
    assert val2.samples[0] == 400


def test_link_verdicts_match_the_pseudo_inertia_criterion(arm):
    robot, truth = arm
    # a solid box 0.2 x 0.1 x 0.05 m of 2 kg: I = m/12 (b^2 + c^2), ... (handbook formula), physical
    m, a, b, c = 2.0, 0.2, 0.1, 0.05
    box = ident.to_vector(m, np.array([0.05, 0, 0]), np.diag([m / 12 * (b * b + c * c), m / 12 * (a * a + c * c), m / 12 * (a * a + b * b)]))
    # principal moments 1, 1, 3 (x 1e-3) break the triangle inequality I3 <= I1 + I2: no mass distribution has them
    bad = ident.to_vector(1.0, np.zeros(3), np.diag([1e-3, 1e-3, 3e-3]))
    inertial = truth.inertial.copy()
    inertial[1], inertial[4] = box, bad
    checks = link_checks(parameter_set_from_vector(robot, inertial.ravel()))
    verdict = {lk.name: lk.physical for lk in checks}
    assert verdict["upper_arm"] and not verdict["wrist_knuckle"]
    # Wensing, Kim and Slotine (2017): physical iff the 4x4 pseudo-inertia is positive semidefinite
    for lk, pi in zip(checks, inertial):
        assert lk.physical == (np.linalg.eigvalsh(ident.pseudo_inertia(pi))[0] >= 0)
    assert "triangle" in checks[4].reason


def test_check_command_text_output_and_errors(tmp_path, arm, capsys):
    robot, truth = arm
    params = DEMO / "sprout6_truth.yaml"
    log = DEMO / "sprout6_heldout.csv"
    assert main(["check", str(DEMO / "sprout6.urdf"), str(params), str(log), "--cutoff", "10", "--window", "0:6"]) == 0
    out = capsys.readouterr().out
    for word in ("RMS error", "R^2", "largest error", "physical", "wrist_pitch", "parallel filtering"):
        assert word in out
    # one bad input: a truth file whose joints are renamed belongs to no joint of the robot
    other = tmp_path / "renamed.yaml"
    other.write_text(params.read_text().replace("flange_roll", "tool_roll"))
    assert main(["check", str(DEMO / "sprout6.urdf"), str(other), str(log), "--cutoff", "10"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "does not belong" in err
    with pytest.raises(IdentError, match="fewer than 2 usable samples"):
        t, q, dq, ddq = states(robot, N=5)
        validate(robot, truth, t, q, dq, ddq, q, np.ones_like(q, dtype=bool))
