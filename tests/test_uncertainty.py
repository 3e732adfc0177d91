"""Honest standard deviations: the block jackknife, checked by Monte Carlo coverage of the truth.

The Monte Carlo runs our closed-loop simulator (`ident.simulate`: PD plus feed-forward from the
description, friction, armature, encoder quantization, torque noise) on an invented 4-joint arm
(tests/data/quad4.urdf) and fits each log with the DEFAULT options of
``ident.fit(robot, ident.load_dataset(...))``. The requirement that a 2-sigma interval cover the
truth about 95 % of the time is the definition of a standard deviation for a normal estimate
(handbook fact); the 90-98 % band allows for the Monte Carlo's own spread and the jackknife's
degrees of freedom.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from test_estimate import sine_trajectory

import ident
from ident.arm.dynamics import coulomb_levels
from ident.arm.model import DRY_FRICTION_TERMS
from ident.arm.parameters import parameter_set_from_vector
from ident.arm.spatial import to_vector
from ident.estimation.blocks import CUTOFF_PERIODS, MIN_BLOCKS, BlockStore, block_length, block_ranges
from ident.estimation.compress import Compressor, compress
from ident.estimation.estimate import fit_compressed
from ident.motion.fourier import FourierTrajectory

QUAD4 = Path(__file__).parent / "data" / "quad4.urdf"
TERMS = ("fv", "fc", "ia")
RUNS = 100
PERIOD, HARMONICS, CONTROL_RATE, LOG_RATE, PERIODS = 4.0, 3, 250.0, 50.0, 2
TORQUE_NOISE = [0.15, 0.15, 0.03, 0.03]  # N m
PAYLOAD = (1.5, [0.05, 0.01, -0.02], np.diag([2e-3, 3e-3, 3e-3]))  # kg, m, kg m^2 about the COM (invented)


def test_block_rule():
    # 20 cutoff periods at 5 Hz and 100 Hz sampling: 400 samples a block when the data are long enough.
    assert block_length([100_000], dt=0.01, cutoff=5.0) == int(CUTOFF_PERIODS / (5.0 * 0.01))
    # Short data: shortened so there are at least MIN_BLOCKS blocks.
    L = block_length([2000], dt=0.01, cutoff=5.0)
    assert L == 2000 // MIN_BLOCKS and len(block_ranges(2000, L)) == MIN_BLOCKS
    # Many short segments: each is at least one block, and the count rule still holds.
    assert sum(max(1, s // block_length([30] * 5, 0.01, 5.0)) for s in [30] * 5) >= MIN_BLOCKS
    ranges = block_ranges(1003, 100)
    assert ranges[0][0] == 0 and ranges[-1][1] == 1003 and all(b - a >= 100 for a, b in ranges)
    assert all(r0[1] == r1[0] for r0, r1 in zip(ranges[:-1], ranges[1:]))
    # The memory cap merges neighbours pairwise and keeps the rows.
    store = BlockStore(max_blocks=4)
    for k in range(9):
        store.append([np.eye(2) * (k + 1)], [k + 1])
    assert len(store) <= 4 and sum(int(r[0]) for r in store.rows) == 45


def _white_case(n_samples=3000, seed=1):
    robot = ident.load_robot(QUAD4)
    rng = np.random.default_rng(seed)
    q, dq, ddq = sine_trajectory(robot, n_samples, rng, amplitude=0.8, dt=0.01)
    pi = np.concatenate([robot.prior.ravel(), np.tile([0.3, 0.5, 0.02], robot.n)])
    tau = ident.predict(robot, q, dq, ddq, pi, TERMS)
    return robot, (q, dq, ddq, tau), rng


def test_jackknife_agrees_with_classic_on_white_noise():
    # For independent, equal-variance residuals the block jackknife estimates the same covariance
    # as s^2 (W^T W)^-1 (Kunsch 1989; Shao and Tu, "The Jackknife and Bootstrap", 1995, from memory).
    robot, (q, dq, ddq, tau), rng = _white_case()
    tau = tau + 0.05 * rng.standard_normal(tau.shape)
    res = ident.fit(robot, (q, dq, ddq, tau), "ols", TERMS)
    assert res.uncertainty["method"] == "blocks" and res.uncertainty["blocks"] == MIN_BLOCKS
    ratio = res.std / res.std_classic
    assert 0.8 < np.median(ratio) < 1.35
    classic = ident.fit(robot, (q, dq, ddq, tau), "ols", TERMS, uncertainty="classic")
    np.testing.assert_allclose(classic.std, res.std_classic, rtol=1e-10)
    assert classic.uncertainty["method"] == "classic" and "classic" in classic.summary()
    assert "block jackknife over 20" in res.summary()
    ps = res.to_parameter_set()
    assert "jackknife" in ps.method["uncertainty"] and ps.diagnostics["uncertainty"]["blocks"] == MIN_BLOCKS


def test_blocks_merged_across_logs_equal_one_call():
    robot, (q, dq, ddq, tau), rng = _white_case(2400, seed=2)
    tau = tau + 0.05 * rng.standard_normal(tau.shape)
    a, b = slice(0, 1300), slice(1300, 2400)
    logs = [(q[s], dq[s], ddq[s], tau[s]) for s in (a, b)]
    one = compress(robot, logs, TERMS, block=100)
    two = compress(robot, logs[0], TERMS, block=100).merge(compress(robot, logs[1], TERMS, block=100))
    assert len(one.blocks) == len(two.blocks) == 13 + 11
    for method in ("ols", "wls"):
        r1, r2 = fit_compressed(one, method), fit_compressed(two, method)
        np.testing.assert_allclose(r2.beta, r1.beta, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(r2.std, r1.std, rtol=1e-8)
    # A compressor without blocks cannot give the jackknife: the fit says so and falls back.
    bare = Compressor(robot, TERMS, keep_blocks=False).add(*logs[0])
    r = fit_compressed(bare, "ols")
    assert r.uncertainty["method"] == "classic" and any("no time blocks" in w for w in r.warnings)


def test_link_masses_where_identifiable(tmp_path):
    # A Cartesian (two prismatic) arm: joint 1 (vertical) carries both links, joint 2 (horizontal)
    # only the second, so m2 = f2 / a2 and m1 = f1 / (a1 + g) - m2 are fixed by the data
    # (Newton's second law); the revolute arm's link masses are not.
    urdf = """<robot name="xz"><link name="base"/>
      <link name="carriage"><inertial><origin xyz="0 0 0.05"/><mass value="3.0"/><inertia ixx="0.01" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.01"/></inertial></link>
      <link name="slide"><inertial><origin xyz="0.1 0 0"/><mass value="1.2"/><inertia ixx="0.002" ixy="0" ixz="0" iyy="0.002" iyz="0" izz="0.002"/></inertial></link>
      <joint name="lift" type="prismatic"><parent link="base"/><child link="carriage"/><axis xyz="0 0 1"/><limit lower="0" upper="1" velocity="1" effort="200"/></joint>
      <joint name="reach" type="prismatic"><parent link="carriage"/><child link="slide"/><axis xyz="1 0 0"/><limit lower="0" upper="0.5" velocity="1" effort="100"/></joint>
    </robot>"""
    (tmp_path / "xz.urdf").write_text(urdf)
    robot = ident.load_robot(tmp_path / "xz.urdf")
    rng = np.random.default_rng(4)
    q, dq, ddq = sine_trajectory(robot, 1500, rng, amplitude=0.2, dt=0.01)
    tau = ident.inverse_dynamics(robot, q, dq, ddq) + 0.1 * rng.standard_normal(q.shape)
    res = ident.fit(robot, (q, dq, ddq, tau), "ols", ())
    (m1, s1), (m2, s2) = res.link_masses
    assert s1 is not None and s2 is not None
    assert abs(m1 - 3.0) < 4 * s1 and abs(m2 - 1.2) < 4 * s2 and s1 < 0.05 and s2 < 0.05
    quad, (q4, dq4, ddq4, tau4), _ = _white_case(800)
    r4 = ident.fit(quad, (q4, dq4, ddq4, tau4 + 0.05 * rng.standard_normal(tau4.shape)), "ols", TERMS)
    assert all(s is None for _, s in r4.link_masses) and "one realization" in r4.summary()


def test_dry_friction_level_is_the_sum_of_the_dry_terms_with_its_std():
    robot, (q, dq, ddq, tau), rng = _white_case(1500, seed=5)
    tau = tau + 0.05 * rng.standard_normal(tau.shape)
    plain = ident.fit(robot, (q, dq, ddq, tau), "ols", TERMS)
    for j, (plus, minus) in enumerate(plain.dry_friction):
        k = plain.names.index(f"{robot.joint_names[j]}.fc")
        assert plus[0] == pytest.approx(plain.beta[k]) and minus[0] == pytest.approx(plain.beta[k])
        assert plus[1] == pytest.approx(plain.std[k], rel=1e-9)
    # Directional and low-speed terms: the levels are those of the realization's friction law
    # (f(+v) - fv v at a speed where tanh has saturated), and still determined by the data
    # although fc, fcp and fcn are regrouped (their columns are linearly dependent).
    rich = ident.fit(robot, (q, dq, ddq, tau), "ols", ("fv", "fc", "ia", "fcp", "fcn", "fl1"))
    up, down = coulomb_levels(rich.joint_params)
    levels = rich.dry_friction
    np.testing.assert_allclose([p[0] for p, _ in levels], up, rtol=1e-9)
    np.testing.assert_allclose([m[0] for _, m in levels], down, rtol=1e-9)
    assert all(p[1] is not None and np.isfinite(p[1]) and m[1] is not None for p, m in levels)
    assert "dry friction +" in rich.summary() and "dry_friction_at_speed" in rich.diagnostics()


# ---------------------------------------------------------------------------------------------
# Monte Carlo with the closed-loop simulator


def _truth(robot):
    pi = robot.prior.copy()
    pi[:, 0] *= 1.1  # the as-built arm: 10 % heavier, 8 % more first moment and inertia (invented)
    pi[:, 1:] *= 1.08
    pi[1, 1] += 0.02  # a cable loom off the arm's axis
    jp = {"fv": np.array([0.4, 0.5, 0.08, 0.06]), "fc": np.array([0.8, 1.0, 0.15, 0.12]), "ia": np.array([0.05, 0.05, 0.004, 0.003])}
    ps = parameter_set_from_vector(robot, np.concatenate([pi.ravel(), np.column_stack([jp[c] for c in TERMS]).ravel()]), TERMS)
    return pi, jp, ps


def _reference(robot):
    rng = np.random.default_rng(3)
    n, w = robot.n, 2 * np.pi / PERIOD
    mid = 0.5 * (robot.lower + robot.upper)
    amp = 0.4 * (robot.upper - robot.lower) / 2 / HARMONICS
    k = np.arange(1, HARMONICS + 1)
    a = rng.uniform(-1, 1, (n, HARMONICS)) * amp[:, None] * w * k
    b = rng.uniform(-1, 1, (n, HARMONICS)) * amp[:, None] * w * k
    traj = FourierTrajectory.from_coefficients(robot.joint_names, PERIOD, np.hstack([mid[:, None], a, b]), mid)
    t, q, dq, ddq = traj.sample(CONTROL_RATE, PERIODS)
    return t[:-1], q[:-1], dq[:-1], ddq[:-1]


@pytest.fixture(scope="module")
def monte_carlo(tmp_path_factory):
    robot = ident.load_robot(QUAD4)
    pi, jp, truth = _truth(robot)
    pi_load = pi.copy()
    pi_load[-1] += to_vector(PAYLOAD[0], np.array(PAYLOAD[1]), PAYLOAD[2])
    ref = _reference(robot)
    opts = {"period": PERIOD, "harmonics": HARMONICS}  # what --excitation gives: the excitation's own facts
    tmp = tmp_path_factory.mktemp("mc")
    z_blocks, z_classic, z_none, z_load, z_levels, z_levels_classic, chosen = [], [], [], [], [], [], []
    for run in range(RUNS):
        settings = ident.SimulationSettings(log_rate=LOG_RATE, substeps=4, torque_noise=TORQUE_NOISE, encoder_counts=2**16, seed=1000 + run)
        logs = {}
        for name, inertial in (("plain", pi), ("load", pi_load)):
            sim = ident.simulate(robot, *ref, inertial, jp, settings)
            path = tmp / f"{name}.parquet"
            pd.DataFrame(sim.columns()).to_parquet(path)
            logs[name] = ident.load_dataset([path], robot=robot, options=opts)
        # default options throughout: conditioning, method and the friction terms chosen from the data
        res = ident.fit(robot, logs["plain"])
        chosen.append(res.terms)
        # the truth in the chosen model's own base parameters (terms it does not have are zero)
        beta_true = ident.base_parameters(robot, res.terms).project(truth.vector(res.terms))
        # The individual dry-friction shape coefficients have no truth of their own: with measured
        # (noisy, filtered) velocities the plant's sharp step is shared between fc and the
        # low-speed shapes. The physical quantity is the dry-friction level at speed (their sum),
        # judged below with its own std; everything else is judged coefficient by coefficient.
        own = np.array([name.rsplit(".", 1)[-1] not in DRY_FRICTION_TERMS for name in res.names])
        z_blocks.append(((res.beta - beta_true) / res.std)[own])
        z_classic.append(((res.beta - beta_true) / res.std_classic)[own])
        for j, (plus, minus) in enumerate(res.dry_friction):
            z_levels += [(plus[0] - jp["fc"][j]) / plus[1], (minus[0] - jp["fc"][j]) / minus[1]]
        for j, (plus, minus) in enumerate(dataclasses.replace(res, cov=res.cov_classic).dry_friction):
            z_levels_classic += [(plus[0] - jp["fc"][j]) / plus[1], (minus[0] - jp["fc"][j]) / minus[1]]
        # Payload on the true arm: none in the plain log, 1.5 kg in the other (same noise seed).
        none = ident.identify_payload(robot, truth, logs["plain"])
        load = ident.identify_payload(robot, truth, logs["load"])
        z_none.append((none.params_ls[0] / none.mass_std, none.significant()))
        z_load.append((load.params_ls[0] - PAYLOAD[0]) / load.mass_std)
    out = dict(names=res.names, z_blocks=np.concatenate(z_blocks), z_levels=np.array(z_levels), z_levels_classic=np.array(z_levels_classic), chosen=chosen, z_classic=np.concatenate(z_classic), z_none=z_none,
               z_load=np.array(z_load), blocks=res.uncertainty.get("blocks"), payload_blocks=load.uncertainty.get("blocks"))
    print(f"\nMonte Carlo, {RUNS} runs: 2-sigma coverage blocks {np.mean(np.abs(out['z_blocks']) < 2):.3f}, "
          f"dry-friction levels {np.mean(np.abs(out['z_levels']) < 2):.3f}, "
          f"classic {np.mean(np.abs(out['z_classic']) < 2):.3f} and {np.mean(np.abs(out['z_levels_classic']) < 2):.3f}; "
          f"no-payload significant {np.mean([s for _, s in z_none]):.3f}; payload within 2 sigma {np.mean(np.abs(out['z_load']) < 2):.3f}")
    return out


def test_block_std_covers_the_truth(monte_carlo):
    z = np.concatenate([monte_carlo["z_blocks"], monte_carlo["z_levels"]])
    assert z.size >= RUNS * len(monte_carlo["names"]) // 2 and monte_carlo["blocks"] >= MIN_BLOCKS
    coverage = np.mean(np.abs(z) < 2)
    assert 0.90 <= coverage <= 0.98, coverage
    # the dry-friction level at speed on its own, too
    assert 0.90 <= np.mean(np.abs(monte_carlo["z_levels"]) < 2) <= 0.98
    # the default really chose (nearly always a low-speed shape here: the measured velocity's noise
    # rounds the plant's step as seen by the model), so this is the default's coverage
    assert any(len(t) > len(TERMS) for t in monte_carlo["chosen"])


def test_classic_std_fails_the_same_check(monte_carlo):
    cov_classic = np.mean(np.abs(np.concatenate([monte_carlo["z_classic"], monte_carlo["z_levels_classic"]])) < 2)
    cov_blocks = np.mean(np.abs(np.concatenate([monte_carlo["z_blocks"], monte_carlo["z_levels"]])) < 2)
    # measured: 0.87 against 0.97 (the classic formula misses the 90 % floor; worst on the
    # dry-friction levels, 0.81, where the filtered residual is most correlated)
    assert cov_classic < 0.90 and cov_classic < cov_blocks - 0.05
    assert np.mean(np.abs(monte_carlo["z_levels_classic"]) < 2) < 0.85


def test_payload_significance_and_coverage(monte_carlo):
    significant = np.mean([s for _, s in monte_carlo["z_none"]])
    assert significant <= 0.05
    assert np.mean(np.abs(monte_carlo["z_load"]) < 2) >= 0.90
    assert monte_carlo["payload_blocks"] >= MIN_BLOCKS
