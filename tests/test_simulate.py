"""The closed-loop simulator: plant integration against reference libraries, sensors, determinism, CLI."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import UR5, erd_path

import ident
from ident.arm.parameters import parameter_set_from_vector
from ident.cli import main
from ident.errors import IdentError
from ident.handover.paramfile import save_parameters
from ident.motion.simulate import SimulationSettings, read_trajectory, simulate

TERMS = ("fv", "fc", "ia")


def reference_motion(robot, seconds=1.0, rate=1000.0, seed=0):
    """A smooth multi-sine reference inside the joint ranges: t (K,), q, dq, ddq (K, n)."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(round(seconds * rate))) / rate
    w = 2 * np.pi * np.array([0.4, 0.9])
    A = rng.uniform(0.2, 0.5, size=(2, robot.n))
    q = np.sin(np.outer(t, w)) @ A
    dq = (np.cos(np.outer(t, w)) * w) @ A
    ddq = (-np.sin(np.outer(t, w)) * w**2) @ A
    return t, q, dq, ddq


def joint_terms(n):
    return {"fv": np.linspace(0.5, 0.1, n), "fc": np.linspace(1.0, 0.2, n), "ia": np.linspace(0.2, 0.02, n)}


@pytest.fixture(scope="module")
def ur5():
    return ident.load_robot(erd_path(UR5))


def test_plant_matches_scipy_integration_of_pinocchio_dynamics(ur5):
    """Replaying the logged torque commands (zero-order hold) through scipy's solve_ivp with pin's dynamics
    (reference libraries) gives the simulator's plant trajectory."""
    pin = pytest.importorskip("pinocchio")
    from scipy.integrate import solve_ivp

    t, q, dq, ddq = reference_motion(ur5, seconds=0.3)
    jp = joint_terms(ur5.n)
    eps = 0.05  # a soft Coulomb law keeps the reference ODE non-stiff
    model = pin.buildModelFromUrdf(str(erd_path(UR5)))
    data = model.createData()
    assert [model.names[i] for i in range(1, model.njoints)] == ur5.joint_names

    def rhs(_, x, tau):
        qq, vv = x[: ur5.n], x[ur5.n :]
        M = pin.crba(model, data, qq).copy()
        M = np.triu(M) + np.triu(M, 1).T
        M[np.diag_indices(ur5.n)] += jp["ia"]
        bias = pin.rnea(model, data, qq, vv, np.zeros(ur5.n))
        fr = jp["fv"] * vv + jp["fc"] * np.tanh(vv / eps)
        return np.concatenate([vv, np.linalg.solve(M, tau - bias - fr)])

    worst = {}
    for substeps in (10, 40):
        res = simulate(ur5, t, q, dq, ddq, ur5.prior, jp, SimulationSettings(substeps=substeps, coulomb_eps=eps, encoder_counts=2**24))
        x = np.concatenate([q[0], dq[0]])
        worst[substeps] = 0.0
        for k in range(t.size - 1):
            worst[substeps] = max(worst[substeps], np.abs(x[: ur5.n] - res.q_true[k]).max())
            x = solve_ivp(rhs, (0.0, t[1] - t[0]), x, args=(res.tau_command[k],), rtol=1e-10, atol=1e-12).y[:, -1]
    # Semi-implicit Euler is first order: 4x the substeps, about 1/4 the error (measured 3.4e-4 -> 8.6e-5 rad
    # over 0.4 s), so the plant converges to the reference solution.
    assert worst[10] < 5e-4
    assert worst[40] < worst[10] / 3


def test_sensors_noise_and_determinism(ur5):
    t, q, dq, ddq = reference_motion(ur5, seconds=1.0, seed=3)
    jp = joint_terms(ur5.n)
    noise = np.array([0.3, 0.3, 0.2, 0.05, 0.05, 0.05])
    s = SimulationSettings(log_rate=250.0, torque_noise=noise, encoder_counts=2**16, seed=5)
    a = simulate(ur5, t, q, dq, ddq, ur5.prior, jp, s)
    b = simulate(ur5, t, q, dq, ddq, ur5.prior, jp, s)
    assert a.t.size == 250 and np.allclose(np.diff(a.t), 1 / 250.0)
    for name in ("q", "dq", "tau", "tau_command", "q_true"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    other = simulate(ur5, t, q, dq, ddq, ur5.prior, jp, SimulationSettings(log_rate=250.0, torque_noise=noise, encoder_counts=2**16, seed=6))
    assert np.array_equal(other.tau_command, a.tau_command) and not np.array_equal(other.tau, a.tau)
    # encoder: positions are whole counts, within half a count of the plant
    res = 2 * np.pi / 2**16
    counts = a.q / res
    assert np.allclose(counts, np.round(counts), atol=1e-6)
    assert np.all(np.abs(a.q - a.q_true) <= 0.5 * res + 1e-12)
    # noise: the sample std of 250 draws is within 20 % of the requested std (chi-square spread ~ 4.5 %)
    std = (a.tau - a.tau_command).std(axis=0)
    assert np.all(np.abs(std / noise - 1) < 0.2)
    # the loop tracks the reference: the controller works
    assert np.all(a.tracking_rms < 0.02)


def test_logged_torque_obeys_the_true_model_at_the_sample_instants(ur5):
    """The logged command equals the true inverse dynamics at the plant state right after the tick,
    with the plant's acceleration over the first substep (equation of motion, checked sample by sample)."""
    t, q, dq, ddq = reference_motion(ur5, seconds=0.5, seed=1)
    jp = joint_terms(ur5.n)
    s = SimulationSettings(substeps=20, coulomb_eps=1e-3, log_velocity=True)
    r = simulate(ur5, t, q, dq, ddq, ur5.prior * 1.05, jp, s)
    # finite-difference acceleration of the plant velocity across one tick: the torque is constant over it
    acc = np.diff(r.dq, axis=0) * 1000.0
    mid_q = 0.5 * (r.q_true[1:] + r.q_true[:-1])
    mid_v = 0.5 * (r.dq[1:] + r.dq[:-1])
    model_tau = ident.inverse_dynamics(ur5, mid_q, mid_v, acc, ur5.prior * 1.05, {"fv": jp["fv"], "ia": jp["ia"]})
    model_tau += jp["fc"] * np.tanh(mid_v / 1e-3)
    err = np.abs(model_tau - r.tau_command[:-1])
    scale = np.abs(r.tau_command).max(axis=0)
    fast = np.abs(mid_v) > 0.05  # away from the stiff Coulomb transition
    assert np.all(err[fast] / np.broadcast_to(scale, err.shape)[fast] < 2e-3)


def test_bad_settings_are_refused(ur5):
    t, q, dq, ddq = reference_motion(ur5, seconds=0.1)
    with pytest.raises(IdentError, match="log-rate"):
        simulate(ur5, t, q, dq, ddq, ur5.prior, None, SimulationSettings(log_rate=300.0))
    with pytest.raises(IdentError, match="torque-noise"):
        simulate(ur5, t, q, dq, ddq, ur5.prior, None, SimulationSettings(torque_noise=[0.1, 0.2]))
    with pytest.raises(IdentError, match="non-negative"):
        simulate(ur5, t, q, dq, ddq, ur5.prior, {"fc": -np.ones(ur5.n)})
    with pytest.raises(IdentError, match="constant step"):
        simulate(ur5, t ** 1.5, q, dq, ddq, ur5.prior)


def _write_inputs(tmp_path, robot, seconds=0.5):
    t, q, dq, ddq = reference_motion(robot, seconds=seconds, seed=2)
    cols = ["time"] + [f"{j}.q" for j in robot.joint_names]
    traj = tmp_path / "traj.csv"
    np.savetxt(traj, np.column_stack([t, q]), delimiter=",", header=",".join(cols), comments="")
    full = np.concatenate([robot.prior.ravel(), np.column_stack([v for v in joint_terms(robot.n).values()]).ravel()])
    truth = tmp_path / "truth.yaml"
    save_parameters(truth, parameter_set_from_vector(robot, full, TERMS))
    return traj, truth


def test_cli_writes_a_log_the_log_reader_accepts(tmp_path, ur5, capsys):
    traj, truth = _write_inputs(tmp_path, ur5)
    out = tmp_path / "log.csv"
    status = main(["simulate", str(erd_path(UR5)), "--trajectory", str(traj), "--truth", str(truth), "--out", str(out),
                   "--log-rate", "200", "--torque-noise", "0.05", "--seed", "3", "--json"])
    assert status == 0
    assert '"samples": 100' in capsys.readouterr().out
    raw = ident.data.load.read_logs([out], robot=ur5)
    assert raw.n_samples == 100 and raw.joint_names == ur5.joint_names
    # velocities derived from the reference when the trajectory lacks them
    t, q, dq, ddq = read_trajectory(traj, ur5)
    assert np.allclose(dq[5:-5], reference_motion(ur5, 0.5, seed=2)[2][5:-5], atol=1e-4)


def test_cli_is_deterministic_for_a_seed(tmp_path, ur5, capsys):
    # Issue 7: `ident simulate ... --seed S` writes the same log byte for byte; another seed draws other noise.
    traj, truth = _write_inputs(tmp_path, ur5, seconds=0.2)
    base = ["simulate", str(erd_path(UR5)), "--trajectory", str(traj), "--truth", str(truth), "--log-rate", "200",
            "--torque-noise", "0.05", "--quiet"]
    logs = {}
    for name, seed in (("a", "4"), ("b", "4"), ("c", "5")):
        logs[name] = tmp_path / f"{name}.csv"
        assert main(base + ["--seed", seed, "--out", str(logs[name])]) == 0
    assert logs["a"].read_bytes() == logs["b"].read_bytes()
    assert logs["a"].read_bytes() != logs["c"].read_bytes()
    capsys.readouterr()


def test_cli_bad_input_one_line_exit_2_no_output(tmp_path, ur5, capsys):
    traj, truth = _write_inputs(tmp_path, ur5, seconds=0.1)
    out = tmp_path / "log.csv"
    base = ["simulate", str(erd_path(UR5)), "--trajectory", str(traj), "--out", str(out)]
    # a parameter file of another robot
    panda = ident.load_robot(erd_path("panda_description/urdf/panda.urdf"), locked={"panda_finger_joint1": 0.02, "panda_finger_joint2": 0.02})
    other = tmp_path / "panda.yaml"
    save_parameters(other, parameter_set_from_vector(panda, panda.prior.ravel()))
    bad_traj = tmp_path / "bad.csv"
    bad_traj.write_text("time,shoulder_pan_joint.q\n0,0\n0.001,0\n0.002,0\n")
    cases = [
        base + ["--truth", str(other)],
        base + ["--truth", str(tmp_path / "missing.yaml")],
        ["simulate", str(erd_path(UR5)), "--trajectory", str(bad_traj), "--truth", str(truth), "--out", str(out)],
        base + ["--truth", str(truth), "--torque-noise", "-1"],
    ]
    for argv in cases:
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and err.startswith("ident simulate: error:"), err
        assert not out.exists()
        assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".log.csv")] == []
