"""ident check against the noise: the floor it states is the RMS error a perfect model leaves, and
collision thresholds keep their false-alarm rate on another log."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import ident
from ident.arm.parameters import description_parameters
from ident.cli import main
from ident.handover.collision import false_alarm_rates
from ident.handover.paramfile import load_parameters, save_parameters

DEMO_URDF = Path(__file__).resolve().parents[1] / "datasets_demo" / "sprout6.urdf"
PERIOD, HARMONICS, RATE, SIGMA = 40.0, 3, 200.0, 0.05  # long periods: the ratio is estimated within a few per cent


def _log(path, robot, truth, seed, periods=3):
    """An open-loop periodic log: the truth's torque (rigid body, viscous, armature) plus white noise
    of std SIGMA N m; positions exact (no quantization) so only the torque noise is left."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(periods * PERIOD * RATE)) / RATE
    w = 20 * np.pi / PERIOD  # the fundamental is the 10th harmonic of the period: faster motion
    amp = rng.uniform(0.1, 0.3, size=(HARMONICS, robot.n))
    ph = rng.uniform(0, 2 * np.pi, size=(HARMONICS, robot.n))
    k = np.arange(1, HARMONICS + 1)[:, None, None]
    arg = k * w * t[None, :, None] + ph[:, None, :]
    q = (amp[:, None, :] * np.sin(arg)).sum(0)
    dq = (amp[:, None, :] * k * w * np.cos(arg)).sum(0)
    ddq = -(amp[:, None, :] * (k * w) ** 2 * np.sin(arg)).sum(0)
    tau = ident.inverse_dynamics(robot, q, dq, ddq, truth.inertial, truth.joint_params)
    tau = tau + SIGMA * rng.standard_normal(tau.shape)
    cols = {"time": t}
    for j, name in enumerate(robot.joint_names):
        cols[f"{name}.q"] = q[:, j]
        cols[f"{name}.tau"] = tau[:, j]
    pd.DataFrame(cols).to_csv(path, index=False, float_format="%.12g")


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("noise")
    robot = ident.load_robot(DEMO_URDF)
    truth = description_parameters(robot, ("fv", "ia"), {"fv": 0.4, "ia": 0.05})
    truth.inertial = truth.inertial * 1.05  # the truth differs from the description: 5 % heavier
    params = tmp / "truth.yaml"
    save_parameters(params, truth)
    logs = [tmp / f"held{k}.csv" for k in (1, 2)]
    for k, p in enumerate(logs):
        _log(p, robot, truth, seed=10 + k)
    return robot, params, logs, tmp


def _check(capsys, params, log, *extra):
    assert main(["check", str(DEMO_URDF), str(params), str(log), "--cutoff", "10", "--json", *extra]) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("how", ["period", "differences"])
def test_true_model_sits_on_the_stated_noise_floor(setup, capsys, how):
    robot, params, logs, _ = setup
    extra = ["--period", str(PERIOD), "--harmonics", str(10 * HARMONICS)] if how == "period" else []
    out = _check(capsys, params, logs[0], *extra)
    # the floor is SIGMA through the filter's noise-power gain (and / sqrt(3) for 3 averaged periods)
    assert ("period averaging" in out["noise_floor"]["method"]) == (how == "period")
    assert "frequency response" in out["noise_floor"]["method"]
    for j in robot.joint_names:
        ratio = out["against_noise"]["moving"][j]["ratio"]
        assert 0.9 <= ratio <= 1.1, (j, ratio)
        # the description's own values (5 % light, no friction or armature) are far above the floor
        assert out["against_noise"]["moving"][j]["prior_ratio"] > 3


def test_collision_thresholds_keep_their_false_alarm_rate_on_a_second_log(setup, capsys):
    robot, params, logs, tmp = setup
    alpha = 1e-2  # the logs hold 24 000 samples: 240 expected alarms per joint
    out_params = tmp / "with_thresholds.yaml"
    out = _check(capsys, params, logs[0], "--false-alarm", str(alpha), "--out", str(out_params))
    assert out["collision"]["false_alarm_rate"] == alpha
    ps = load_parameters(out_params)
    assert set(ps.collision["joints"]) == set(robot.joint_names)
    data = ident.load_dataset([logs[1]], robot=robot, options={"cutoff": 10.0})
    err = data.tau - ident.inverse_dynamics(robot, data.q, data.dq, data.ddq, ps.inertial, ps.joint_params)
    rates = false_alarm_rates(ps.collision, robot.joint_names, err)
    assert np.all(rates >= alpha / 3) and np.all(rates <= 3 * alpha), rates


def test_true_parameters_and_the_default_fit_on_the_closed_loop_demo_log(capsys, tmp_path):
    # Our closed-loop simulator's held-out demo log (PD plus feed-forward, Coulomb and viscous
    # friction, armature, encoder quantization, torque noise): with the true parameters the moving
    # samples sit on the stated floor (within 10 %), the default fit within 1.2 of it.
    demo = DEMO_URDF.parent
    check = ["--period", "8", "--harmonics", "4", "--json"]
    assert main(["check", str(DEMO_URDF), str(demo / "sprout6_truth.yaml"), str(demo / "sprout6_heldout.csv"), *check]) == 0
    out = json.loads(capsys.readouterr().out)
    for j, figs in out["against_noise"]["moving"].items():
        assert 0.9 <= figs["ratio"] <= 1.1, (j, figs["ratio"])
    fitted = tmp_path / "fit.yaml"
    assert main(["fit", str(DEMO_URDF), str(demo / "sprout6_excite.csv"), "--quiet", "--out", str(fitted)]) == 0
    capsys.readouterr()
    assert main(["check", str(DEMO_URDF), str(fitted), str(demo / "sprout6_heldout.csv"), *check]) == 0
    out = json.loads(capsys.readouterr().out)
    for j, figs in out["against_noise"]["moving"].items():
        assert figs["ratio"] <= 1.2, (j, figs["ratio"])
