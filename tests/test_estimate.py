"""Estimation: compression, OLS and WLS, uncertainty, diagnostics and errors.

External references: torques of the rigid-body part come from pinocchio's RNEA (`pin.rnea`) on
the same URDF with the same inertial parameters, and the compressed solve is compared with
`scipy.linalg.lstsq` on the whole stacked regressor.
"""

from __future__ import annotations

import numpy as np
import pinocchio as pin
import pytest
import scipy.linalg
from conftest import UR5, erd_path

import ident
from ident.arm.base import base_parameters
from ident.arm.spatial import from_pseudo_inertia, from_vector, pseudo_inertia
from ident.errors import DataError, IdentError, NumericalError
from ident.estimation.compress import Compressor, compress
from ident.estimation.estimate import fit, fit_compressed
from ident.estimation.result import ExcitationWarning

# ------------------------------------------------------------------------------------------------
# helpers shared with the other estimation test files


def sine_trajectory(robot, n_samples, rng, amplitude=0.8, dt=0.01, period=10.0, harmonics=4, scale=None):
    """Sum-of-sines joint motion around the middle of each joint's range, with analytic q', q''.

    `scale` (n,) multiplies each joint's amplitude (e.g. to keep a wrist almost still).
    """
    t = np.arange(n_samples) * dt
    n = robot.n
    lo = np.where(np.isfinite(robot.lower), robot.lower, -np.pi)
    hi = np.where(np.isfinite(robot.upper), robot.upper, np.pi)
    mid = 0.5 * (lo + hi)
    s = np.ones(n) if scale is None else np.asarray(scale, float)
    q = np.tile(mid, (n_samples, 1))
    dq = np.zeros((n_samples, n))
    ddq = np.zeros((n_samples, n))
    for j in range(n):
        for h in range(1, harmonics + 1):
            w = 2 * np.pi * h / period
            a = s[j] * amplitude * rng.uniform(0.3, 1.0) / h
            ph = rng.uniform(0, 2 * np.pi)
            q[:, j] += a * np.sin(w * t + ph)
            dq[:, j] += a * w * np.cos(w * t + ph)
            ddq[:, j] -= a * w * w * np.sin(w * t + ph)
    return q, dq, ddq


def random_physical_truth(robot, rng, terms=("fv", "fc", "ia")):
    """A full parameter vector near the description's values that is physically realizable by
    construction: each pseudo-inertia is 0.7-1.0 times the prior's plus four point masses of 2-10 %
    of the link's mass within 0.1 m of its frame origin (a CAD model off by some tens of percent)."""
    out = []
    for pi0 in robot.prior:
        J = rng.uniform(0.7, 1.0) * pseudo_inertia(pi0)
        for _ in range(4):
            v = np.append(rng.uniform(-0.1, 0.1, 3), 1.0)
            J = J + rng.uniform(0.02, 0.1) * max(pi0[0], 0.1) * np.outer(v, v)
        out.append(from_pseudo_inertia(J))
    coef = {"fv": (0.5, 3.0), "fc": (0.5, 2.0), "fo": (-0.5, 0.5), "ia": (0.05, 0.4)}
    jt = np.column_stack([rng.uniform(*coef[c], robot.n) for c in terms]).reshape(-1) if terms else np.zeros(0)
    return np.concatenate([np.ravel(out), jt])


def pin_torque(urdf, robot, full, terms, q, dq, ddq):
    """Joint torques from pinocchio's RNEA (reference library) with the inertial part of `full`,
    plus the joint terms fv q' + fc sign(q') + fo + ia q''. Joints of `robot` must be the URDF's
    movable joints in order (no locked joints)."""
    model = pin.buildModelFromUrdf(str(urdf))
    assert [model.names[i] for i in range(1, model.njoints)] == robot.joint_names
    for i in range(robot.n):
        m, c, I_c = from_vector(full[10 * i : 10 * i + 10])
        model.inertias[i + 1] = pin.Inertia(float(m), c, I_c)
    data = model.createData()
    tau = np.array([pin.rnea(model, data, q[k], dq[k], ddq[k]) for k in range(q.shape[0])])
    nt = len(terms)
    jt = full[10 * robot.n :].reshape(robot.n, nt) if nt else np.zeros((robot.n, 0))
    basis = {"fv": dq, "fc": np.sign(dq), "fo": np.ones_like(dq), "ia": ddq}
    for k, code in enumerate(terms):
        tau = tau + jt[:, k] * basis[code]
    return tau


def scaled_error(estimate, truth):
    """Per-parameter error relative to |truth|, with a floor of 1e-3 of the largest |truth| so a
    parameter that happens to be near zero does not divide by zero."""
    floor = 1e-3 * np.abs(truth).max()
    return np.abs(estimate - truth) / np.maximum(np.abs(truth), floor)


# ------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def ur5_case():
    urdf = erd_path(UR5)
    robot = ident.load_robot(urdf)
    rng = np.random.default_rng(11)
    terms = ("fv", "fc", "ia")
    truth = random_physical_truth(robot, rng, terms)
    q, dq, ddq = sine_trajectory(robot, 1500, rng)
    tau = pin_torque(urdf, robot, truth, terms, q, dq, ddq)
    return robot, terms, truth, (q, dq, ddq, tau)


@pytest.mark.parametrize("method", ["ols", "wls", "consistent"])
def test_noiseless_recovery_every_estimator(ur5_case, method):
    # Torques from pinocchio's RNEA (reference library): base parameters recovered to 1e-8.
    robot, terms, truth, data = ur5_case
    res = fit(robot, data, method, terms)
    beta_true = base_parameters(robot, terms).project(truth)
    assert scaled_error(res.beta, beta_true).max() < 1e-8
    assert np.all(res.residual_rms < 1e-7)
    if method == "consistent":
        assert res.physical.all()
        assert res.solver["stage"] == "exact"


def test_compressed_equals_full_stacked_lstsq(ur5_case):
    # Reference: scipy.linalg.lstsq on the whole stacked base regressor (no compression).
    robot, terms, _, (q, dq, ddq, tau) = ur5_case
    rng = np.random.default_rng(2)
    tau = tau + 0.3 * rng.standard_normal(tau.shape)
    bp = base_parameters(robot, terms)
    Yb = bp.columns(ident.regressor(robot, q, dq, ddq, terms)).reshape(-1, bp.n_base)
    ref, rss, *_ = scipy.linalg.lstsq(Yb, tau.reshape(-1))
    # Small chunks and two logs: the per-joint triangles are folded many times and merged.
    half = q.shape[0] // 2
    comp = compress(robot, [(q[:half], dq[:half], ddq[:half], tau[:half]), (q[half:], dq[half:], ddq[half:], tau[half:])], terms, chunk=97)
    res = fit_compressed(comp, "ols")
    assert np.abs(res.beta - ref).max() <= 1e-10 * np.abs(ref).max()
    red = comp.reduce()
    assert red.rho**2 == pytest.approx(float(rss), rel=1e-10)
    # Separate compressors merged afterwards give the same triangles' solution.
    a = Compressor(robot, terms).add(q[:half], dq[:half], ddq[:half], tau[:half])
    b = Compressor(robot, terms).add(q[half:], dq[half:], ddq[half:], tau[half:])
    merged = fit_compressed(a.merge(b), "ols")
    assert np.abs(merged.beta - ref).max() <= 1e-10 * np.abs(ref).max()
    # The per-joint residuals from the triangles equal the direct ones.
    r = (Yb @ ref - tau.reshape(-1)).reshape(tau.shape)
    np.testing.assert_allclose(comp.joint_rss(ref), (r**2).sum(axis=0), rtol=1e-9)


def _coverage(method, sigma, reps=200):
    path = erd_path(UR5)
    robot = ident.load_robot(path, joints=["shoulder_pan_joint", "shoulder_lift_joint", "elbow_joint"])
    terms = ("fv", "fc")
    rng = np.random.default_rng(7)
    truth = random_physical_truth(robot, rng, terms)
    q, dq, ddq = sine_trajectory(robot, 150, rng, dt=0.05)
    tau0 = ident.predict(robot, q, dq, ddq, truth, terms)
    beta_true = base_parameters(robot, terms).project(truth)
    hits = []
    for _ in range(reps):
        tau = tau0 + sigma * rng.standard_normal(tau0.shape)
        res = fit(robot, (q, dq, ddq, tau), method, terms)
        hits.append(np.abs(res.beta - beta_true) <= 2 * res.std)
    return np.mean(hits)


def test_ols_two_sigma_coverage_monte_carlo():
    # 200 repetitions with equal noise on every joint: nominal 2-sigma coverage is 95.4 % (normal
    # distribution); the issue asks for 90-98 %.
    cov = _coverage("ols", np.array([0.2, 0.2, 0.2]))
    assert 0.90 <= cov <= 0.98


def test_wls_two_sigma_coverage_monte_carlo():
    # Unequal noise per joint (the case WLS is for, Gautier 1997): same 90-98 % requirement.
    cov = _coverage("wls", np.array([0.05, 0.6, 0.2]))
    assert 0.90 <= cov <= 0.98


def test_wls_beats_ols_with_unequal_noise():
    # With very unequal joint noise, weighting by 1/sigma_j lowers the estimator's variance
    # (Gauss-Markov: WLS with the right weights is the best linear unbiased estimator).
    path = erd_path(UR5)
    robot = ident.load_robot(path, joints=["shoulder_pan_joint", "shoulder_lift_joint", "elbow_joint"])
    terms = ("fv",)
    rng = np.random.default_rng(3)
    truth = random_physical_truth(robot, rng, terms)
    q, dq, ddq = sine_trajectory(robot, 400, rng, dt=0.025)
    tau = ident.predict(robot, q, dq, ddq, truth, terms) + np.array([0.02, 2.0, 0.5]) * rng.standard_normal((400, 3))
    ols = fit(robot, (q, dq, ddq, tau), "ols", terms)
    wls = fit(robot, (q, dq, ddq, tau), "wls", terms)
    assert np.median(wls.std / ols.std) < 0.8
    np.testing.assert_allclose(wls.sigma, [0.02, 2.0, 0.5], rtol=0.15)


def test_diagnostics_and_summary(ur5_case):
    robot, terms, truth, (q, dq, ddq, tau) = ur5_case
    rng = np.random.default_rng(4)
    noisy = tau + 0.1 * rng.standard_normal(tau.shape)
    res = fit(robot, (q, dq, ddq, noisy), "ols", terms)
    assert res.condition > 1 and np.isfinite(res.condition)
    np.testing.assert_allclose(res.residual_rms, 0.1, rtol=0.1)
    # Relative std is 100 std / |beta| and the flag follows the common-practice 10 % rule.
    np.testing.assert_allclose(res.rel_std, 100 * res.std / np.abs(res.beta))
    assert np.array_equal(res.poorly_identified, res.rel_std > 10)
    text = res.summary()
    for word in ("estimate", "std", "rel.std %", "flag", "Condition number", robot.body_names[-1]):
        assert word in text
    # One table row per base parameter.
    assert sum(1 for line in text.splitlines() if line.split() and line.split()[0] in res.names) == len(res.names)
    ps = res.to_parameter_set()
    assert ps.base.names == res.names
    np.testing.assert_allclose(ps.base.std, res.std)
    assert ps.method["name"] == "ols"
    assert ps.diagnostics["condition_number"] == pytest.approx(res.condition)
    # The realization reproduces the estimated base parameters (same torque as Y_b beta).
    np.testing.assert_allclose(base_parameters(robot, terms).project(res.full), res.beta, rtol=1e-9, atol=1e-12)


def test_unexcited_joint_is_reported():
    path = erd_path(UR5)
    robot = ident.load_robot(path)
    rng = np.random.default_rng(5)
    scale = np.ones(robot.n)
    scale[-1] = 0.0  # the last wrist joint never moves: its friction is never seen
    q, dq, ddq = sine_trajectory(robot, 800, rng, scale=scale)
    terms = ("fv",)
    tau = ident.predict(robot, q, dq, ddq, random_physical_truth(robot, rng, terms), terms) + 0.05 * rng.standard_normal((800, robot.n))
    with pytest.raises(NumericalError, match="do not determine.*wrist_3_joint.fv"):
        fit(robot, (q, dq, ddq, tau), "ols", terms)
    # The consistent fit goes on: the prior decides what the data do not see, and says so.
    with pytest.warns(ExcitationWarning, match="barely excited"):
        res = fit(robot, (q, dq, ddq, tau), "consistent", terms)
    assert res.physical.all() and res.solver["stage"] == "trade-off"
    assert any("wrist_3_joint.fv" in u for u in res.unexcited)
    # No data, no prior: near zero. Only a very weak ridge holds it, below the solver's tolerance,
    # so round-off in the compressed data moves it by about 1e-2 (against fv of 1-2 on moving joints).
    assert res.joint_params["fv"][-1] == pytest.approx(0.0, abs=3e-2)


def test_bad_inputs_raise_clear_errors(ur5_case):
    robot, terms, _, (q, dq, ddq, tau) = ur5_case
    bad = tau.copy()
    bad[17, 2] = np.nan
    with pytest.raises(DataError, match="tau.*sample 17.*elbow_joint"):
        fit(robot, (q, dq, ddq, bad), "ols", terms)
    with pytest.raises(IdentError, match="method"):
        fit(robot, (q, dq, ddq, tau), "ridge", terms)
    with pytest.raises(IdentError, match="tau"):
        fit(robot, (q, dq, ddq, tau[:, :3]), "ols", terms)
    with pytest.raises(IdentError, match="need method 'consistent'"):
        fit(robot, (q, dq, ddq, tau), "ols", terms, bounds=ident.Bounds(total_mass=10.0))
    with pytest.raises(NumericalError, match="not enough data"):
        fit(robot, (q[:5], dq[:5], ddq[:5], tau[:5]), "ols", terms)
    with pytest.raises(DataError, match="no data"):
        fit(robot, [], "ols", terms)


def test_dataset_slow_samples_are_dropped_for_coulomb(ur5_case):
    # A data set marks samples whose |q'| is too small to trust sign(q'); with the Coulomb term
    # those joint equations are left out (and the fit stays exact on noiseless data).
    robot, terms, truth, (q, dq, ddq, tau) = ur5_case
    slow = np.abs(dq) < 0.05
    seg = ident.Segment("synthetic", np.arange(q.shape[0]) * 0.01, q, dq, ddq, tau, slow)
    data = ident.Dataset(list(robot.joint_names), [seg])
    comp = compress(robot, data, terms)
    assert np.array_equal(comp.rows, (~slow).sum(axis=0))
    res = fit_compressed(comp, "ols")
    beta_true = base_parameters(robot, terms).project(truth)
    assert scaled_error(res.beta, beta_true).max() < 1e-8


def test_progress_reports_every_sample_across_logs(ur5_case):
    robot, terms, _, (q, dq, ddq, tau) = ur5_case
    seen = []
    half = q.shape[0] // 2
    logs = [(q[:half], dq[:half], ddq[:half], tau[:half]), (q[half:], dq[half:], ddq[half:], tau[half:])]
    res = ident.fit(robot, logs, "ols", terms, progress=lambda done, total: seen.append((done, total)))
    assert seen[-1] == (q.shape[0], q.shape[0])
    assert all(b[0] >= a[0] for a, b in zip(seen, seen[1:]))
    assert res.samples == q.shape[0] and res.sources == ["arrays[0]", "arrays[1]"]


def test_slow_velocity_threshold_for_arrays(ur5_case):
    robot, terms, truth, (q, dq, ddq, tau) = ur5_case
    comp = compress(robot, (q, dq, ddq, tau), terms, slow_velocity=0.05)
    assert np.array_equal(comp.rows, (np.abs(dq) >= 0.05).sum(axis=0))
    res = ident.fit(robot, (q, dq, ddq, tau), "wls", terms, slow_velocity=0.05)
    assert scaled_error(res.beta, base_parameters(robot, terms).project(truth)).max() < 1e-8
    with pytest.raises(IdentError, match="slow_velocity"):
        compress(robot, (q, dq, ddq, tau), terms, slow_velocity=-1.0)
