"""Acceptance checks on a second, independent plant: the UR5 and the Panda simulated by MuJoCo.

ident's own simulator integrates the very model the fit assumes; MuJoCo (a general-purpose engine
from the registry, used only here) does not. Its plant (``mujoco_plant.py``) has as-built masses
the description does not know, viscous friction, rotor inertia and a dry friction that ramps
through zero speed (fc clip(q'/vs, -1, 1), not fc sign(q')), runs a 1 kHz PD + feed-forward loop
and logs encoder positions (2^17 counts) and applied torque with 0.3 N m noise.

First the plant itself is checked against ident's dynamics (an engine-vs-engine check of the URDF
conversion), then the fits: ident with its DEFAULT options (a user gives only the excitation's
period and harmonics) against the textbook script (``textbook_fit.py``) on a held-out log, judged
in one common way for every model (``heldout_check.py``: common 50 Hz states, predicted torque
and, for moving samples, measured torque through one zero-phase 20 Hz low-pass):

(a) RMS error over moving samples (|q'| > 0.2 rad/s) no larger than the textbook's (+5 %);
(b) RMS error over all samples, raw measured torque, at most 1.2 x the noise sigma;
(c) every link physically consistent.

The plant's true parameters with its true friction curve meet (a) and (b) (checked below), so
both are attainable. With the default options (a), (b) and (c) are met on both arms (measured:
(a) at most 1.034x the textbook's error, (b) at most 1.11 sigma).
"""

from __future__ import annotations

from dataclasses import dataclass

import heldout_check as hc
import mujoco
import mujoco_plant as mp
import numpy as np
import pytest
import textbook_fit as tb

import ident

ARMS = ["ur5", "panda"]
TOLERANCE = 1.05  # (a): 5 % above the textbook script's error
NOISE_FACTOR = 1.2  # (b): at most 1.2 x the torque noise sigma


@dataclass
class Run:
    """One arm: logs, ident's default fit, the textbook fit and their held-out errors."""

    scenario: mp.Scenario
    data: ident.Dataset
    fit: ident.FitResult
    textbook: tb.TextbookModel
    held_out: tuple  # raw (t, q, tau) as read from the CSV
    errors: dict  # label -> heldout_check.HeldOut


@pytest.fixture(scope="session")
def second_plant(tmp_path_factory):
    """``get(key) -> Run``, simulated and fitted once per session."""
    cache = {}

    def get(key: str) -> Run:
        if key not in cache:
            sc = mp.scenario(key, tmp_path_factory.mktemp(f"mujoco_{key}"))
            rob = sc.plant.description
            data = ident.load_dataset([sc.id_csv], robot=rob, options=sc.options)  # defaults otherwise
            fit = ident.fit(rob, data)
            textbook = tb.textbook_fit(rob, *tb.read_log(sc.id_csv, rob.joint_names))
            held = tb.read_log(sc.held_out_csv, rob.joint_names)
            truth_rigid = sc.plant.true_parameters(("fv", "ia"))

            def perfect(q, dq, ddq):
                return ident.predict(rob, q, dq, ddq, truth_rigid, ("fv", "ia")) + sc.plant.dry_friction(dq)

            errors = {label: hc.held_out_errors(*held, predict)
                      for label, predict in (("ident", fit.predict), ("textbook", textbook.predict), ("perfect", perfect))}
            cache[key] = Run(sc, data, fit, textbook, held, errors)
        return cache[key]

    return get


def random_states(robot: ident.Robot, count: int, seed: int):
    rng = np.random.default_rng(seed)
    lo = np.where(np.isfinite(robot.lower), robot.lower, -np.pi)
    hi = np.where(np.isfinite(robot.upper), robot.upper, np.pi)
    return rng.uniform(lo, hi, (count, robot.n)), rng.normal(0, 1.5, (count, robot.n)), rng.normal(0, 3.0, (count, robot.n))


# ------------------------------------------------------------------------------------------------
# The plant
# ------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("key", ARMS)
def test_plant_setup(key):
    plant = mp.build_plant(key)
    m = plant.model
    assert plant.joint_names == list(plant.description.joint_names)
    assert m.nv == plant.description.n == len(plant.spec.home)
    np.testing.assert_allclose(m.opt.gravity, [0.0, 0.0, -9.81])
    assert m.opt.disableflags & mujoco.mjtDisableBit.mjDSBL_CONTACT
    assert m.opt.disableflags & mujoco.mjtDisableBit.mjDSBL_LIMIT
    assert m.opt.timestep == pytest.approx(1.0 / (mp.RATE * mp.SUBSTEPS))
    np.testing.assert_array_equal(m.dof_armature, plant.ia)
    np.testing.assert_array_equal(m.dof_damping, plant.fv)
    np.testing.assert_array_equal(m.dof_frictionloss, plant.fc)
    # as built: a few links off the description, each still physically consistent
    assert len(plant.changes) == plant.spec.changed_links
    assert all(0.85 <= s <= 1.2 and np.linalg.norm(d) <= 0.01 + 1e-12 for s, d in plant.changes.values())
    changed = np.any(np.abs(plant.truth.prior - plant.description.prior) > 1e-9, axis=1)
    assert 1 <= changed.sum() <= plant.spec.changed_links
    assert np.all(np.linalg.eigvalsh(ident.pseudo_inertia(plant.truth.prior))[:, 0] > 0)
    # the vector of true values is in the description's column order
    p = plant.true_parameters("fv,fc,ia")
    names = plant.description.param_names("fv,fc,ia")
    assert p[names.index(f"{plant.joint_names[-1]}.fc")] == plant.fc[-1]
    np.testing.assert_array_equal(p[: 10 * plant.n], plant.truth.prior.reshape(-1))


@pytest.mark.parametrize("key", ARMS)
def test_plant_inverse_dynamics_matches_ident(key):
    # Source: MuJoCo's mj_inverse, an engine independent of ident, on the converted URDF.
    # Agreement to 1e-8 relative validates the conversion (stripping, locked fingers turned into
    # fixed joints at 0.02 m, as-built inertials, joint order) and the true-parameter vector.
    plant = mp.build_plant(key)
    rob = plant.description
    q, dq, ddq = random_states(rob, 40, seed=7)
    tau_mj = plant.inverse_dynamics(q, dq, ddq, friction=False)
    tau_id = ident.inverse_dynamics(rob, q, dq, ddq, plant.truth.prior, {"ia": plant.ia})
    np.testing.assert_allclose(tau_mj, tau_id, rtol=1e-8, atol=1e-8 * np.abs(tau_id).max())
    # viscous friction and the parameter vector, through ident's regressor
    tau_mj_fv = plant.inverse_dynamics(q, dq, ddq, friction=True)
    tau_reg = ident.predict(rob, q, dq, ddq, plant.true_parameters(("fv", "ia")), ("fv", "ia"))
    np.testing.assert_allclose(tau_mj_fv, tau_reg, rtol=1e-8, atol=1e-8 * np.abs(tau_reg).max())
    # without as-built changes the plant is the description (ident locks the fingers itself)
    plain = mp.build_plant(key, as_built=False)
    tau_plain = plain.inverse_dynamics(q, dq, ddq)
    tau_desc = ident.inverse_dynamics(rob, q, dq, ddq, None, {"ia": plain.ia})
    np.testing.assert_allclose(tau_plain, tau_desc, rtol=1e-8, atol=1e-8 * np.abs(tau_desc).max())


def test_locked_revolute_joint_conversion():
    # Source: MuJoCo's mj_inverse. A revolute joint locked at an angle becomes a fixed joint whose
    # origin turns by that angle; ident locks and merges the same joint itself.
    path = mp.erd_path(mp.UR5)
    locked = {"elbow_joint": 0.7, "wrist_2_joint": -1.1}
    rob = ident.load_robot(path, locked=locked)
    m = mujoco.MjModel.from_xml_string(mp.plant_urdf(path, locked))
    assert [m.joint(i).name for i in range(m.njnt)] == list(rob.joint_names)
    d = mujoco.MjData(m)
    q, dq, ddq = random_states(rob, 20, seed=3)
    tau_mj = np.empty_like(q)
    for k in range(len(q)):
        d.qpos[:], d.qvel[:], d.qacc[:] = q[k], dq[k], ddq[k]
        mujoco.mj_inverse(m, d)
        tau_mj[k] = d.qfrc_inverse
    tau_id = ident.inverse_dynamics(rob, q, dq, ddq)
    np.testing.assert_allclose(tau_mj, tau_id, rtol=1e-8, atol=1e-8 * np.abs(tau_id).max())


@pytest.mark.parametrize("key", ARMS)
def test_plant_dry_friction_ramps_through_zero_speed(key, second_plant):
    # Source: MuJoCo's soft dry-friction constraint, measured; the designed curve is
    # fc clip(q'/vs, -1, 1) at steady speed (mujoco_plant._soften_dry_friction).
    plant = mp.build_plant(key)
    for j in (0, plant.n - 1):
        v, f, _, _ = mp.friction_ramp(plant, j)
        np.testing.assert_allclose(-f, plant.dry_friction(v[:, None] * np.ones(plant.n))[:, j], atol=1e-3 * plant.fc[j])
        slow = (np.abs(v) > 0.1 * plant.vs[j]) & (np.abs(v) < 0.5 * plant.vs[j])
        assert slow.sum() > 100 and np.all(np.abs(f[slow]) < 0.6 * plant.fc[j])  # not fc sign(q')
    # in the closed-loop log: at the level whenever the joint moves clearly faster than vs (a
    # joint accelerating hard just above vs can sit a few per mille below it)
    log = second_plant(key).scenario.id_log
    fast = np.abs(log.dq_true) > 1.2 * plant.vs
    np.testing.assert_allclose(np.abs(log.friction)[fast], np.broadcast_to(plant.fc, fast.shape)[fast], rtol=1e-3)


@pytest.mark.parametrize("key", ARMS)
def test_ident_reads_plant_logs(key, second_plant):
    run = second_plant(key)
    sc = run.scenario
    assert run.data.joint_names == sc.plant.joint_names
    assert run.data.info["periods_averaged"] == mp.ID_PERIODS - 1  # the first period (start-up) is left out of the spread
    # ident's period-averaging noise estimate against the noise the plant added
    np.testing.assert_allclose(np.sqrt(run.data.noise_var), sc.id_log.noise, rtol=0.1)
    assert sc.id_log.saturated == 0 and sc.held_out_log.saturated == 0


@pytest.mark.parametrize("key", ARMS)
def test_textbook_baseline_recovers_plant_friction(key, second_plant):
    # The yardstick of (a) must itself be sound: above 0.2 rad/s the plant's dry friction is at its
    # level, so the textbook fit's fv and fc land on the plant's values (measured within 2.5 %).
    run = second_plant(key)
    np.testing.assert_allclose(run.textbook.joint_term("fv"), run.scenario.plant.fv, rtol=0.05)
    np.testing.assert_allclose(run.textbook.joint_term("fc"), run.scenario.plant.fc, rtol=0.05)


@pytest.mark.parametrize("key", ARMS)
def test_perfect_model_meets_the_checks(key, second_plant):
    # (a) and (b) are attainable: the plant's own parameters and friction curve meet them.
    run = second_plant(key)
    e, sigma = run.errors, run.scenario.held_out_log.noise
    assert np.all(e["perfect"].moving <= TOLERANCE * e["textbook"].moving)
    assert np.all(e["perfect"].all <= NOISE_FACTOR * sigma)


# ------------------------------------------------------------------------------------------------
# ident with its default options
# ------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("key", ARMS)
def test_defaults_moving_error_no_worse_than_textbook(key, second_plant):
    # (a) measured before parallel filtering and the data-chosen defaults: 1.8-3.2x the textbook's
    # error on the UR5, 1.1-1.6x on the Panda; now at most 1.034x and 1.005x (1.067x on the UR5
    # before the slow zone reached a quarter cutoff period around undecided signs)
    e = second_plant(key).errors
    assert np.all(e["ident"].moving <= TOLERANCE * e["textbook"].moving), (e["ident"].moving, e["textbook"].moving)


@pytest.mark.parametrize("key", ARMS)
def test_defaults_error_within_noise(key, second_plant):
    # (b) measured today: up to 2.2 sigma on the UR5's heavy joints (fc sign(q') at reversals);
    # the Panda's small dry friction keeps it within 1.14 sigma
    run = second_plant(key)
    sigma = run.scenario.held_out_log.noise
    assert np.all(run.errors["ident"].all <= NOISE_FACTOR * sigma), run.errors["ident"].all


@pytest.mark.parametrize("key", ARMS)
def test_defaults_links_physical(key, second_plant):
    # (c) through ident's own held-out check of the parameter file
    run = second_plant(key)
    rob = run.scenario.plant.description
    held = ident.load_dataset([run.scenario.held_out_csv], robot=rob, options=run.scenario.options)
    check = ident.validate_dataset(rob, run.fit.to_parameter_set(), held)
    assert check.all_physical, [lk.name for lk in check.links if not lk.physical]
    assert np.all(run.fit.physical)
