"""Excitation design: constraints, rest at home, regeneration, criteria, augment mode, CLI.

Reference checks use pinocchio (`pin`, from the robot descriptions of `example-robot-data`) for
joint limits, inverse dynamics and forward kinematics, and numpy/scipy for the linear algebra.
"""

from __future__ import annotations

import json

import numpy as np
import pinocchio as pin
import pytest
import scipy.optimize
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident
from ident.cli import main as cli_main
from ident.errors import IdentError
from ident.motion.config import ExcitationConfig, load_excitation_config
from ident.motion.constraints import check_trajectory
from ident.motion.criteria import criteria_from_information, information_matrix
from ident.motion.design import design_criteria, design_excitation, random_feasible
from ident.motion.fourier import FourierTrajectory, load_trajectory
from ident.motion.outputs import summary_text, write_excitation
from ident.motion.problem import DesignProblem

UR5_HOME = [0.0, -1.57, 1.57, -1.57, -1.57, 0.0]
PANDA_HOME = [0.0, -0.3, 0.0, -2.2, 0.0, 2.0, 0.8]
TABLE = {"name": "table", "type": "plane", "point": [0.0, 0.0, 0.0], "normal": [0.0, 0.0, 1.0], "margin": 0.05}


def _pin_model(rel, locked=None):
    """Reference model from pinocchio; locked joints removed at their positions."""
    model = pin.buildModelFromUrdf(str(erd_path(rel)))
    if locked:
        q_ref = pin.neutral(model)
        ids = []
        for name, val in locked.items():
            jid = model.getJointId(name)
            q_ref[model.joints[jid].idx_q] = val
            ids.append(jid)
        model = pin.buildReducedModel(model, ids, q_ref)
    return model


def _config(model, home, watch, **over):
    """A design request whose limits come from pinocchio's reading of the URDF (reference)."""
    cfg = {
        "period": 8.0,
        "harmonics": 4,
        "periods": 1,
        "rate": 100.0,
        "home": list(home),
        "terms": "fv,fc",
        "limits": {
            "position_margin": 0.1,
            "lower": [float(v) for v in model.lowerPositionLimit],
            "upper": [float(v) for v in model.upperPositionLimit],
            "velocity": [0.6 * float(v) for v in model.velocityLimit],
            "acceleration": 3.0,
            "torque": [0.7 * float(v) for v in model.effortLimit],
        },
        "keepout": {"points": [{"name": n, "link": link, "point": pt} for n, link, pt in watch], "regions": [dict(TABLE)]},
        "optimizer": {"seed": 3, "starts": 2, "budget": None, "max_iterations": 40, "design_samples": 100, "check_factor": 10},
    }
    for k, v in over.items():
        cfg[k] = v
    return cfg


UR5_WATCH = [("flange", "wrist_3_link", [0.0, 0.0, 0.0]), ("tip", "tool0", [0.0, 0.0, 0.1]), ("elbow", "forearm_link", [0.0, 0.0, 0.0])]
PANDA_WATCH = [("hand", "panda_hand", [0.0, 0.0, 0.1]), ("wrist", "panda_link7", [0.0, 0.0, 0.0]), ("elbow", "panda_link4", [0.0, 0.0, 0.0])]


@pytest.fixture(scope="module")
def ur5_case():
    robot = ident.load_robot(erd_path(UR5))
    model = _pin_model(UR5)
    cfg = _config(model, UR5_HOME, UR5_WATCH)
    cfg["keepout"]["regions"].append({"name": "pillar", "type": "cylinder", "center": [-0.6, 0.0], "radius": 0.1, "margin": 0.05})
    cfg["keepout"]["regions"].append({"name": "station", "type": "box", "lower": [0.3, 0.5, 0.0], "upper": [0.8, 1.0, 0.9], "margin": 0.05})
    return robot, model, cfg, design_excitation(robot, cfg)


@pytest.fixture(scope="module")
def panda_case():
    robot = ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)
    model = _pin_model(PANDA, PANDA_FINGERS_LOCKED)
    cfg = _config(model, PANDA_HOME, PANDA_WATCH)
    return robot, model, cfg, design_excitation(robot, cfg)


def _assert_constraints_hold(model, cfg, traj, t):
    """Every constraint of `cfg` at times `t`, evaluated with pinocchio (reference), not with ident."""
    q, dq, ddq = traj.evaluate(t)
    lim = cfg["limits"]
    lo = np.array(lim["lower"]) + lim["position_margin"]
    hi = np.array(lim["upper"]) - lim["position_margin"]
    tol = 1e-9
    assert np.all(q >= lo - tol) and np.all(q <= hi + tol)
    assert np.all(np.abs(dq) <= np.array(lim["velocity"]) + tol)
    assert np.all(np.abs(ddq) <= lim["acceleration"] + tol)
    data = model.createData()
    tau = np.array([pin.rnea(model, data, q[k], dq[k], ddq[k]) for k in range(t.size)])
    assert np.all(np.abs(tau) <= np.array(lim["torque"]) * (1 + 1e-9))
    points = {p["name"]: p for p in cfg["keepout"]["points"]}
    for k in range(t.size):
        pin.framesForwardKinematics(model, data, q[k])
        for p in points.values():
            x = data.oMf[model.getFrameId(p["link"])].act(np.array(p["point"]))
            for reg in cfg["keepout"]["regions"]:
                m = reg["margin"]
                if reg["type"] == "plane":
                    assert x[2] - reg["point"][2] >= m - tol, (p["name"], reg["name"], t[k])
                elif reg["type"] == "cylinder":
                    assert np.hypot(x[0] - reg["center"][0], x[1] - reg["center"][1]) >= reg["radius"] + m - tol
                elif reg["type"] == "box":
                    lo_b, hi_b = np.array(reg["lower"]) - m, np.array(reg["upper"]) + m
                    assert not np.all((x > lo_b + tol) & (x < hi_b - tol)), (p["name"], reg["name"], t[k])


@pytest.mark.parametrize("case", ["ur5_case", "panda_case"])
def test_every_constraint_holds_on_a_grid_ten_times_finer(case, request):
    robot, model, cfg, res = request.getfixturevalue(case)
    opt = cfg["optimizer"]
    n_fine = 10 * opt["design_samples"]
    # shifted by half a step so the samples differ from the optimizer's own check grid
    t = (np.arange(n_fine) + 0.5) * (cfg["period"] / n_fine)
    _assert_constraints_hold(model, cfg, res.trajectory, t)
    _assert_constraints_hold(model, cfg, res.trajectory, res.sample()[0])
    assert not res.margins.violations(robot.joint_names)


@pytest.mark.parametrize("case", ["ur5_case", "panda_case"])
def test_starts_and_ends_at_rest_at_home(case, request):
    robot, model, cfg, res = request.getfixturevalue(case)
    t, q, dq, ddq = res.sample()
    for k in (0, -1):
        np.testing.assert_allclose(q[k], cfg["home"], atol=1e-9)
        assert np.max(np.abs(dq[k])) < 1e-9
        assert np.max(np.abs(ddq[k])) < 1e-9
    assert t[-1] == pytest.approx(cfg["period"] * cfg["periods"], abs=1e-12)


def test_regenerating_from_the_coefficients_file_reproduces_the_csv(ur5_case, tmp_path):
    robot, _, _, res = ur5_case
    paths = write_excitation(tmp_path / "out", res, robot)
    table = np.loadtxt(paths["csv"], delimiter=",", skiprows=1)
    header = paths["csv"].read_text().splitlines()[0].split(",")
    assert header[:4] == ["time", "shoulder_pan_joint.q", "shoulder_pan_joint.dq", "shoulder_pan_joint.ddq"]
    traj = load_trajectory(paths["coefficients"], robot)
    t, q, dq, ddq = traj.sample(res.config.rate, res.config.periods)
    assert np.max(np.abs(table[:, 0] - t)) <= 1e-12
    assert np.max(np.abs(table[:, 1::3] - q)) <= 1e-12
    assert np.max(np.abs(table[:, 2::3] - dq)) <= 1e-12
    assert np.max(np.abs(table[:, 3::3] - ddq)) <= 1e-12
    assert paths["plot"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    summary = json.loads(paths["json"].read_text())
    assert set(summary["criteria"]) == {"cond", "logdet"}
    assert set(summary["keepout"]) == {"table", "pillar", "station"}
    assert all(j["peak_torque"] > 0 for j in summary["joints"])


def test_optimized_condition_number_beats_random_feasible_median_by_five(ur5_case):
    robot, _, cfg, res = ur5_case
    # 100 random trajectories of the same family, each scaled to its largest feasible motion
    rnd = random_feasible(robot, cfg, 100, seed=11)
    median = float(np.median([c["cond"] for _, c in rnd]))
    opt = design_criteria(robot, res.config, res.trajectory)["cond"]
    # measured when written: random median 67.4, optimized 7.34 (2 starts, 40 iterations a stage) -> 9.2x
    assert median / opt >= 5.0, (median, opt)


def test_criteria_match_numpy_on_the_stacked_column_scaled_regressor(ur5_case):
    robot, _, cfg, res = ur5_case
    t = np.arange(300) * (cfg["period"] / 300)
    q, dq, ddq = res.trajectory.evaluate(t)
    bp = ident.arm.base.base_parameters(robot, "fv,fc")
    W = bp.columns(ident.regressor(robot, q, dq, ddq, "fv,fc")).reshape(-1, bp.n_base)
    crit = criteria_from_information(information_matrix(robot, q, dq, ddq, "fv,fc"))
    # reference: numpy's 2-norm condition number of the explicitly column-normalized matrix
    assert crit["cond"] == pytest.approx(np.linalg.cond(W / np.linalg.norm(W, axis=0)), rel=1e-8)
    assert crit["logdet"] == pytest.approx(np.linalg.slogdet(W.T @ W)[1], rel=1e-10)


def test_objective_gradient_matches_finite_differences(ur5_case):
    robot, _, cfg, _ = ur5_case
    for crit, sharp in (("cond", None), ("cond", 8.0), ("logdet", None)):
        c = ExcitationConfig.from_dict(robot, {**cfg, "criterion": crit})
        prob = DesignProblem(robot, c, None)
        prob.sharpness = sharp  # the smooth (power-mean) condition number the starts explore with
        z = prob.random_z(np.random.default_rng(5))
        s, _ = prob.repair(z, s_max=np.inf)
        z = 1.2 * s * z  # slightly outside: penalties active too
        prob.mu = 1e3
        idx = np.arange(0, z.size, 4)

        def f_part(v):
            zz = z.copy()
            zz[idx] = v
            return prob.objective(zz)[0]

        # reference: scipy's forward-difference gradient of the same function
        num = scipy.optimize.approx_fprime(z[idx], f_part, 1e-6)
        ana = prob.objective(z)[1][idx]
        assert np.max(np.abs(ana - num)) <= 1e-3 * np.max(np.abs(num))


def test_smooth_condition_number_bounds_the_exact_one_and_tends_to_it():
    from ident.motion.criteria import criterion_grad

    rng = np.random.default_rng(2)
    B = rng.normal(size=(40, 6)) * np.array([1.0, 2.0, 0.5, 3.0, 1.0, 0.1])
    A = B.T @ B
    exact, _ = criterion_grad(A, "cond")
    # reference: numpy's condition number of the column-normalized matrix
    assert exact == pytest.approx(np.log(np.linalg.cond(B / np.linalg.norm(B, axis=0))), rel=1e-10)
    soft = [criterion_grad(A, "cond", p)[0] for p in (4.0, 16.0, 256.0)]
    # power means bracket the extreme eigenvalues and approach them as p grows (power-mean
    # inequality, from memory): an upper bound of log cond, decreasing in p, within log(6)/p
    assert soft[0] >= soft[1] >= soft[2] >= exact
    assert soft[2] - exact <= np.log(6) / 256 + 1e-12


def test_fourier_series_derivatives_and_period():
    rng = np.random.default_rng(0)
    traj = FourierTrajectory(["a", "b"], 5.0, rng.normal(size=2), rng.normal(size=(2, 3)), rng.normal(size=(2, 3)), np.zeros(2))
    t = np.linspace(0.0, 5.0, 20001)
    q, dq, ddq = traj.evaluate(t)
    # central differences of the sampled series (numpy.gradient) agree with the analytic derivatives
    np.testing.assert_allclose(np.gradient(q, t, axis=0)[1:-1], dq[1:-1], atol=1e-5)
    np.testing.assert_allclose(np.gradient(dq, t, axis=0)[1:-1], ddq[1:-1], atol=1e-4)
    q2, dq2, ddq2 = traj.evaluate(t + 5.0)
    np.testing.assert_allclose(q2, q, atol=1e-12)
    bounds = traj.derivative_bounds()
    assert np.all(np.abs(dq).max(axis=0) <= bounds[0] + 1e-12)
    assert np.all(np.abs(ddq).max(axis=0) <= bounds[1] + 1e-12)


def test_same_seed_gives_the_same_trajectory():
    robot = ident.load_robot(erd_path(UR5))
    cfg = _config(_pin_model(UR5), UR5_HOME, UR5_WATCH)
    cfg["optimizer"].update(starts=1, max_iterations=10)
    a = design_excitation(robot, cfg, max_evaluations=25)
    b = design_excitation(robot, cfg, max_evaluations=25)
    np.testing.assert_array_equal(a.trajectory.coefficients, b.trajectory.coefficients)
    cfg["optimizer"]["seed"] = 4
    c = design_excitation(robot, cfg, max_evaluations=25)
    assert not np.array_equal(a.trajectory.coefficients, c.trajectory.coefficients)


def test_time_budget_stops_the_optimizer_and_progress_shows_the_best_criterion(monkeypatch, capsys):
    import sys

    robot = ident.load_robot(erd_path(UR5))
    cfg = _config(_pin_model(UR5), UR5_HOME, UR5_WATCH)
    # a budget far too small for even one start: the optimizer must stop, say so, and still
    # return a trajectory that keeps every constraint (checked with pinocchio, reference)
    cfg["optimizer"].update(starts=3, budget=0.01, max_iterations=40)
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True)  # the bar draws on terminals only
    res = design_excitation(robot, cfg, progress=True)
    bar = capsys.readouterr().err
    assert res.budget_hit
    assert res.starts[0]["stop"] == "time budget"
    assert len(res.starts) < 3  # later starts skipped once the budget is spent
    assert "excite [" in bar and f"best cond {res.starts[0]['final']:.4g}" in bar
    assert res.starts[0]["final"] == res.criteria["cond"]  # the bar's best is the written criterion
    assert "time budget stopped the optimizer" in summary_text(res)
    t = (np.arange(1000) + 0.5) * (cfg["period"] / 1000)
    _assert_constraints_hold(_pin_model(UR5), cfg, res.trajectory, t)


def test_augment_mode_completes_rank_deficient_earlier_logs():
    robot = ident.load_robot(erd_path(UR5))
    model = _pin_model(UR5)
    cfg = _config(model, UR5_HOME, UR5_WATCH)
    cfg["optimizer"].update(starts=1, max_iterations=30)
    # earlier run: only the first three joints moved (wrist held): wrist parameters unidentified
    t = np.arange(0, 20.0, 0.02)
    q = np.tile(np.array(UR5_HOME), (t.size, 1))
    dq = np.zeros_like(q)
    ddq = np.zeros_like(q)
    for j, f in enumerate((0.11, 0.17, 0.23)):
        w = 2 * np.pi * f
        q[:, j] += 0.4 * np.sin(w * t)
        dq[:, j] = 0.4 * w * np.cos(w * t)
        ddq[:, j] = -0.4 * w * w * np.sin(w * t)
    res = design_excitation(robot, cfg, logs=(q, dq, ddq))
    assert res.criteria_prior["cond"] == np.inf
    assert np.isfinite(res.criteria["cond"])
    # the reported combined criterion is that of the stacked data (old log + new CSV samples)
    tn, qn, dqn, ddqn = res.sample()
    stacked = [np.vstack([a, b[:-1]]) for a, b in ((q, qn), (dq, dqn), (ddq, ddqn))]
    ref = criteria_from_information(information_matrix(robot, *stacked, "fv,fc"))
    assert res.criteria["cond"] == pytest.approx(ref["cond"], rel=1e-6)
    assert res.criteria["logdet"] == pytest.approx(ref["logdet"], rel=1e-9)
    assert "rank deficient" in summary_text(res)


def test_augment_mode_reads_earlier_logs_through_the_log_reader(tmp_path, capsys):
    robot = ident.load_robot(erd_path(UR5))
    cfg = _config(_pin_model(UR5), UR5_HOME, UR5_WATCH)
    cfg["optimizer"].update(starts=1, max_iterations=5)
    t = np.arange(0, 12.0, 0.01)
    q = np.tile(np.array(UR5_HOME), (t.size, 1))
    q[:, 0] += 0.5 * np.sin(2 * np.pi * 0.2 * t)
    tau = ident.inverse_dynamics(robot, q, np.gradient(q, t, axis=0), np.gradient(np.gradient(q, t, axis=0), t, axis=0))
    cols = ["time"] + [f"{j}.q" for j in robot.joint_names] + [f"{j}.tau" for j in robot.joint_names]
    path = tmp_path / "first_run.csv"
    np.savetxt(path, np.column_stack([t, q, tau]), delimiter=",", header=",".join(cols), comments="")
    ds = ident.load_dataset([path], robot=robot, options={"cutoff": 4.0})
    res = design_excitation(robot, cfg, logs=ds, max_evaluations=10)
    assert res.criteria_prior["cond"] == np.inf  # one joint moved: most base parameters unseen
    assert np.isfinite(res.criteria["cond"])
    # the same through the CLI: the summary reports the earlier logs, the new run and both combined
    import yaml

    (tmp_path / "excite.yaml").write_text(yaml.safe_dump(cfg))
    argv = ["excite", str(erd_path(UR5)), "--config", str(tmp_path / "excite.yaml"), "--quiet", "--cutoff", "4"]
    assert cli_main(argv + ["--out", str(tmp_path / "next"), "--augment", str(path)]) == 0
    summary = json.loads((tmp_path / "next" / "summary.json").read_text())
    assert summary["criteria_earlier_logs"]["rank_deficient"] is True
    assert np.isfinite(summary["criteria"]["cond"]) and summary["criteria"]["logdet"] > summary["criteria_new_trajectory"]["logdet"]
    # a log of another robot (its columns name other joints): one line, exit 2, nothing written
    other = tmp_path / "other_arm.csv"
    other.write_text(path.read_text().replace("shoulder_pan_joint", "base_yaw"))
    capsys.readouterr()
    assert cli_main(argv + ["--out", str(tmp_path / "bad"), "--augment", str(other)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "other_arm.csv" in err[0] and "shoulder_pan_joint" in err[0]
    assert not (tmp_path / "bad").exists()


# -- bad requests -----------------------------------------------------------------------------
@pytest.fixture(scope="module")
def ur5():
    return ident.load_robot(erd_path(UR5))


def _small(**over):
    cfg = {"period": 8.0, "harmonics": 4, "rate": 100.0, "home": list(UR5_HOME), "limits": {"acceleration": 3.0}}
    cfg.update(over)
    return cfg


@pytest.mark.parametrize(
    "cfg, message",
    [
        (_small(keepout={"points": [{"name": "flange", "link": "wrist_3_link"}], "regions": [{"name": "shelf", "type": "plane", "point": [0, 0, 0.6], "normal": [0, 0, 1]}]}), "inside keep-out region 'shelf'"),
        (_small(keepout={"points": [{"name": "flange", "link": "wrist_3_link"}], "regions": [{"name": "cell", "type": "box", "lower": [0.3, 0, 0.3], "upper": [0.6, 0.3, 0.7]}]}), "inside keep-out region 'cell'"),
        (_small(limits={"acceleration": 3.0, "position_margin": 3.5}), "leaves no room"),
        (_small(home=[0.0, -1.57, 3.1, -1.57, -1.57, 0.0], limits={"acceleration": 3.0, "position_margin": 0.1}), "home: joint 'elbow_joint'"),
        (_small(home={"shoulder_pan_joint": 0.0}), "missing joint(s) shoulder_lift_joint"),
        (_small(limits={}), "limits.acceleration: required"),
        (_small(limits={"acceleration": 3.0, "torque": {"shoulder_lift_joint": 1.0}}), "holding joint 'shoulder_lift_joint'"),
        (_small(rate=333.3), "not a whole number of controller ticks"),
        (_small(colour="red"), "unknown setting 'colour'"),
        (_small(keepout={"points": [{"link": "no_such_link"}], "regions": []}), "no link or frame named 'no_such_link'"),
        (_small(home=[0.0, float("nan"), 0.0, 0.0, 0.0, 0.0]), "expected a finite number"),
    ],
)
def test_infeasible_or_malformed_requests_raise(ur5, cfg, message):
    with pytest.raises(IdentError, match=None) as err:
        design_excitation(ur5, cfg)
    assert message in str(err.value)


def test_cli_writes_every_output_and_prints_the_cautions(tmp_path, capsys):
    import yaml

    cfg = _config(_pin_model(UR5), UR5_HOME, UR5_WATCH)
    cfg["optimizer"].update(starts=1, max_iterations=15)
    path = tmp_path / "excite.yaml"
    path.write_text(yaml.safe_dump(cfg))
    out = tmp_path / "run"
    status = cli_main(["excite", str(erd_path(UR5)), "--config", str(path), "--out", str(out), "--quiet"])
    assert status == 0
    text = capsys.readouterr().out
    assert "emergency stop" in text and "ISO 10218" in text and "reduced speed" in text
    assert sorted(p.name for p in out.iterdir()) == ["coefficients.yaml", "summary.json", "summary.txt", "trajectory.csv", "trajectory.png"]
    # re-check the written trajectory against the same limits
    again = tmp_path / "again"
    assert cli_main(["excite", str(erd_path(UR5)), "--config", str(path), "--out", str(again), "--from", str(out / "coefficients.yaml")]) == 0
    assert (again / "trajectory.csv").read_text() == (out / "trajectory.csv").read_text()
    # an edited coefficients file that no longer leaves home at rest (a velocity step at switch-on,
    # within every limit) is refused in one line naming the file and the joint; nothing is written
    coeffs = yaml.safe_load((out / "coefficients.yaml").read_text())
    coeffs["joints"]["elbow_joint"]["sin"][0] += 0.01
    edited = tmp_path / "edited.yaml"
    edited.write_text(yaml.safe_dump(coeffs, sort_keys=False))  # joint order is the robot's
    capsys.readouterr()
    assert cli_main(["excite", str(erd_path(UR5)), "--config", str(path), "--out", str(tmp_path / "edited_run"), "--from", str(edited)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "edited.yaml" in err[0] and "'elbow_joint' does not start and end at rest" in err[0], err
    assert not (tmp_path / "edited_run").exists()


def test_cli_reports_infeasible_request_in_one_line_without_output(tmp_path, capsys):
    import yaml

    cfg = _small(keepout={"points": [{"name": "flange", "link": "wrist_3_link"}], "regions": [{"name": "shelf", "type": "plane", "point": [0, 0, 0.6], "normal": [0, 0, 1]}]})
    path = tmp_path / "excite.yaml"
    path.write_text(yaml.safe_dump(cfg))
    out = tmp_path / "run"
    status = cli_main(["excite", str(erd_path(UR5)), "--config", str(path), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert len(err) == 1 and "shelf" in err[0]
    assert not out.exists()


def test_d_optimal_design_raises_the_log_determinant():
    robot = ident.load_robot(erd_path(UR5))
    cfg = _config(_pin_model(UR5), UR5_HOME, UR5_WATCH, criterion="logdet")
    cfg["optimizer"].update(starts=1, max_iterations=15)
    res = design_excitation(robot, cfg)
    rec = res.starts[0]
    assert rec["final"] > rec["initial"] + 1.0  # log det grows (D-optimality maximizes it)
    assert res.config.criterion == "logdet" and np.isfinite(res.criteria["cond"])
    assert "optimized: logdet" in summary_text(res)


def test_documented_example_config_reads_as_its_comments_say():
    # datasets_demo/examples/excite.yaml is the config format's documentation: it must load for the
    # UR5 description it names, with the scales applied to the URDF limits as read by pinocchio (reference)
    from pathlib import Path

    example = Path(__file__).resolve().parents[1] / "datasets_demo" / "examples" / "excite.yaml"
    robot = ident.load_robot(erd_path(UR5))
    model = _pin_model(UR5)
    cfg = load_excitation_config(example, robot)
    np.testing.assert_allclose(cfg.home, UR5_HOME)
    np.testing.assert_allclose(cfg.velocity, 0.6 * model.velocityLimit)  # velocity_scale: 0.6
    np.testing.assert_allclose(cfg.torque, 0.7 * model.effortLimit)  # torque_scale: 0.7
    np.testing.assert_allclose(cfg.lower, model.lowerPositionLimit)
    np.testing.assert_allclose(cfg.acceleration, [3.0, 3.0, 3.0, 5.0, 5.0, 5.0])
    assert cfg.terms == ("fv", "fc", "ia") and cfg.criterion == "cond" and cfg.offset is None  # offset: free
    assert cfg.period * cfg.rate == pytest.approx(round(cfg.period * cfg.rate))
    regions = {r.name: r for r in cfg.regions}
    assert [r.kind for r in cfg.regions] == ["plane", "cylinder", "box"]
    assert sorted(regions["loading_station"].points) == ["flange", "tool_tip", "wrist"]
    assert regions["bench_top"].points is None  # default: every watched point
    # the home pose it names is feasible: the check of the home pose passes on the fine grid
    home = FourierTrajectory.from_coefficients(robot.joint_names, cfg.period, np.column_stack([cfg.home, np.zeros((robot.n, 2 * cfg.harmonics))]), cfg.home)
    assert not check_trajectory(robot, cfg, home, np.linspace(0.0, cfg.period, 50)).violations(robot.joint_names)
