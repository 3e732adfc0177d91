"""The physically consistent fit: LMI constraints, bounds, regulariser, and its advantage on poor data."""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest
from conftest import UR5, erd_path
from test_estimate import random_physical_truth, scaled_error, sine_trajectory

import ident
from ident.arm.base import base_parameters
from ident.arm.spatial import from_vector, pseudo_inertia
from ident.errors import IdentError, NumericalError
from ident.estimation.estimate import fit
from ident.estimation.result import Bounds
from ident.handover.paramfile import load_parameters, save_parameters

TERMS = ("fv", "fc")


@pytest.fixture(scope="module")
def ur5():
    return ident.load_robot(erd_path(UR5))


def _poor_wrist_case(robot, seed):
    """Training data that leave the light last link poorly excited (last joint at 2 % of the
    others' amplitude, the one before at 30 %), noisy torques; held-out data of the same kind."""
    rng = np.random.default_rng(seed)
    truth = random_physical_truth(robot, rng, TERMS)
    scale = np.ones(robot.n)
    scale[-1], scale[-2] = 0.02, 0.3
    q, dq, ddq = sine_trajectory(robot, 1000, rng, scale=scale)
    tau = ident.predict(robot, q, dq, ddq, truth, TERMS) + 0.3 * rng.standard_normal(q.shape)
    qh, dqh, ddqh = sine_trajectory(robot, 1000, rng, scale=scale)
    tauh = ident.predict(robot, qh, dqh, ddqh, truth, TERMS)
    return (q, dq, ddq, tau), (qh, dqh, ddqh, tauh)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_poorly_excited_link_ols_impossible_consistent_physical_and_better(ur5, seed):
    # Qualitative result of Wensing, Kim and Slotine 2017 (RA-L, "Linear matrix inequalities for
    # physically consistent inertial parameter identification"): on data that excite a light
    # distal link poorly, least squares gives a physically impossible link while the LMI-
    # constrained fit stays physical and predicts held-out torques better.
    train, held = _poor_wrist_case(ur5, seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ols = fit(ur5, train, "ols", TERMS)
        cons = fit(ur5, train, "consistent", TERMS)
    assert not ols.physical.all()
    assert ols.min_eigenvalue.min() < 0
    ev = np.linalg.eigvalsh(pseudo_inertia(cons.inertial))
    assert ev[:, 0].min() >= -1e-9
    assert cons.physical.all()
    assert np.all(cons.joint_params["fv"] >= -1e-9) and np.all(cons.joint_params["fc"] >= -1e-9)
    qh, dqh, ddqh, tauh = held
    err_ols = np.sqrt(np.mean((ols.predict(qh, dqh, ddqh) - tauh) ** 2))
    err_cons = np.sqrt(np.mean((cons.predict(qh, dqh, ddqh) - tauh) ** 2))
    assert err_cons < err_ols
    # The trade-off stage ran (the OLS base estimate has no physical realization) and reports it.
    assert cons.solver["stage"] == "trade-off"
    assert any("physically impossible" in w for w in ols.warnings)


def test_realizable_noisy_estimate_is_kept_exactly(ur5):
    # When the WLS base estimate has a physical realization it is the constrained optimum too, so
    # the consistent fit keeps it and the prior only chooses among realizations.
    rng = np.random.default_rng(8)
    truth = random_physical_truth(ur5, rng, TERMS)
    q, dq, ddq = sine_trajectory(ur5, 1500, rng)
    tau = ident.predict(ur5, q, dq, ddq, truth, TERMS) + 0.002 * rng.standard_normal(q.shape)
    wls = fit(ur5, (q, dq, ddq, tau), "wls", TERMS)
    cons = fit(ur5, (q, dq, ddq, tau), "consistent", TERMS)
    assert cons.solver["stage"] == "exact"
    assert scaled_error(cons.beta, wls.beta).max() < 1e-8
    assert cons.physical.all()
    np.testing.assert_allclose(cons.std, wls.std)


def test_bounds_are_honoured(ur5):
    train, _ = _poor_wrist_case(ur5, 0)
    last, prev = ur5.body_names[-1], ur5.body_names[-2]
    bounds = Bounds(
        mass={last: (0.15, 0.25)},
        com={last: ((-0.01, -0.01, -0.01), (0.01, 0.01, 0.03)), prev: ((-0.02, -0.02, -0.05), (0.02, 0.02, 0.05))},
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit(ur5, train, "consistent", TERMS, bounds=bounds)
    m, c, _ = from_vector(res.inertial[-1])
    assert 0.15 - 1e-7 <= m <= 0.25 + 1e-7
    assert np.all(c >= np.array([-0.01, -0.01, -0.01]) - 1e-6) and np.all(c <= np.array([0.01, 0.01, 0.03]) + 1e-6)
    _, c2, _ = from_vector(res.inertial[-2])
    assert np.all(np.abs(c2[:2]) <= 0.02 + 1e-6) and abs(c2[2]) <= 0.05 + 1e-6
    # A known total mass is met exactly (an equality constraint).
    total = float(random_physical_truth(ur5, np.random.default_rng(0), TERMS)[0:10 * ur5.n:10].sum())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit(ur5, train, "consistent", TERMS, bounds=Bounds(total_mass=total))
    assert res.inertial[:, 0].sum() == pytest.approx(total, rel=1e-6)


def test_bad_and_infeasible_bounds(ur5):
    train, _ = _poor_wrist_case(ur5, 0)
    with pytest.raises(IdentError, match="'nolink' is not a body"):
        fit(ur5, train, "consistent", TERMS, bounds=Bounds(mass={"nolink": (1, 2)}))
    with pytest.raises(IdentError, match="min <= max"):
        fit(ur5, train, "consistent", TERMS, bounds=Bounds(mass={ur5.body_names[0]: (2, 1)}))
    # Each link at least 5 kg but 6 links weighing 10 kg in total: no solution.
    infeasible = Bounds(mass={b: (5.0, 50.0) for b in ur5.body_names}, total_mass=10.0)
    with pytest.raises(NumericalError, match="consistent fit"):
        fit(ur5, train, "consistent", TERMS, bounds=infeasible)


def test_massless_prior_body(ur5):
    # A description may give a link no inertia at all; the regulariser must still be defined.
    prior = ur5.prior.copy()
    prior[-1] = 0.0
    robot = dataclasses.replace(ur5, prior=prior)
    train, held = _poor_wrist_case(ur5, 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit(robot, train, "consistent", TERMS)
    assert res.physical.all() and np.all(np.isfinite(res.full))
    # The OLS realization with that prior is finite too.
    ols = fit(robot, train, "ols", TERMS)
    assert np.all(np.isfinite(ols.full))


def test_consistent_parameter_file_roundtrip(ur5, tmp_path):
    train, held = _poor_wrist_case(ur5, 2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = fit(ur5, train, "consistent", TERMS)
    path = tmp_path / "params.yaml"
    save_parameters(path, res.to_parameter_set(data={"files": ["synthetic"]}))
    ps = load_parameters(path, ur5)
    np.testing.assert_allclose(ps.vector(), res.full, rtol=1e-12, atol=1e-15)
    assert ps.physical().all()
    assert ps.method["name"] == "consistent" and ps.method["stage"] == "trade-off"
    assert ps.base.names == res.names
    beta = base_parameters(ur5, TERMS).project(ps.vector())
    np.testing.assert_allclose(beta, res.beta, rtol=1e-9, atol=1e-12)
    qh, dqh, ddqh, _ = held
    np.testing.assert_allclose(ident.predict(ur5, qh, dqh, ddqh, ps.vector(), ps.terms), res.predict(qh, dqh, ddqh), atol=1e-9)
