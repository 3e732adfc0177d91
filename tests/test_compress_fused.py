"""The fused compression pass: regressor and per-joint folding in one kernel, the centred Gram
route and its fall-back to Householder QR, caller-supplied joint-term signals, threads.

External references: `scipy.linalg.lstsq` on the whole stacked base regressor (LAPACK, no
compression), and for ill-conditioned data a least-squares solution in extended precision
(numpy longdouble, 64-bit significand on x86-64) of the same stacked problem.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path
from test_estimate import random_physical_truth, sine_trajectory

import ident
from ident import Compressor, base_parameters, fit_compressed
from ident.arm import kernels
from ident.errors import DataError, IdentError

TERMS = ("fv", "fc", "ia")


@pytest.fixture(scope="module")
def ur5():
    return ident.load_robot(erd_path(UR5))


def _log(robot, n_samples, seed, noise, scale=None, truth=None):
    rng = np.random.default_rng(seed)
    if truth is None:
        truth = random_physical_truth(robot, rng, TERMS)
    q, dq, ddq = sine_trajectory(robot, n_samples, rng, scale=scale)
    tau = ident.predict(robot, q, dq, ddq, truth, TERMS) + noise * rng.standard_normal(q.shape)
    return truth, (q, dq, ddq, tau)


def _solve(comp):
    red = comp.reduce()
    return scipy.linalg.solve_triangular(red.R, red.z)


def _stacked(robot, q, dq, ddq, signals=None):
    """The whole base regressor (N, n, b); joint-term columns from `signals` (N, n, k) if given."""
    bp = base_parameters(robot, TERMS)
    Y = ident.regressor(robot, q, dq, ddq, TERMS)
    if signals is not None:
        n, nt = robot.n, len(TERMS)
        for j in range(n):
            Y[:, j, 10 * n + nt * j : 10 * n + nt * (j + 1)] = signals[:, j, :]
    return bp.columns(Y)


def _extended_lstsq(A, b):
    """Least squares in extended precision: exact preconditioning by P = R0^-1 (R0 from a double
    QR; any non-singular P gives the same solution), normal equations of A P in longdouble with
    refinement. Error about kappa(A) eps_longdouble, far below double-precision QR's."""
    R0 = scipy.linalg.qr(A, mode="r")[0][: A.shape[1]]
    P = scipy.linalg.solve_triangular(R0, np.eye(A.shape[1])).astype(np.longdouble)
    B = A.astype(np.longdouble) @ P
    G, g = B.T @ B, B.T @ b.astype(np.longdouble)
    y = np.zeros(A.shape[1], dtype=np.longdouble)
    for _ in range(4):
        y = y + np.linalg.solve(G.astype(float), (g - G @ y).astype(float))
    return P @ y


def test_gram_route_equals_stacked_lstsq(ur5):
    # Well-conditioned, noisy, with dropped slow samples: the centred Gram route is taken and
    # agrees with scipy.linalg.lstsq on the stacked base regressor of the kept rows to 1e-10.
    _, (q, dq, ddq, tau) = _log(ur5, 6000, 1, 0.05)
    keep = np.abs(dq) > 0.02
    comp = Compressor(ur5, TERMS, chunk=500).add(q, dq, ddq, tau, keep=keep)
    assert comp.folded["gram"] > 0 and comp.folded["refolded"] == 0
    Yb = _stacked(ur5, q, dq, ddq)
    ref, rss, *_ = scipy.linalg.lstsq(Yb[keep], tau[keep])
    beta = _solve(comp)
    assert np.abs(beta - ref).max() <= 1e-10 * np.abs(ref).max()
    assert comp.reduce().rho ** 2 == pytest.approx(float(rss), rel=1e-10)
    r = np.where(keep, np.einsum("sjb,b->sj", Yb, ref) - tau, 0.0)
    np.testing.assert_allclose(comp.joint_rss(ref), (r**2).sum(axis=0), rtol=1e-9)
    house = Compressor(ur5, TERMS, chunk=500, fold="householder").add(q, dq, ddq, tau, keep=keep)
    assert house.folded == {"householder": 6000, "gram": 0, "refolded": 0}
    assert np.abs(beta - _solve(house)).max() <= 1e-10 * np.abs(ref).max()
    np.testing.assert_array_equal(comp.rows, keep.sum(axis=0))


@pytest.mark.parametrize("wrist, noise, gram", [(3e-4, 1e-4, True), (1e-3, 0.3, False)])
def test_ill_conditioned_no_worse_than_householder(ur5, wrist, noise, gram):
    # Short logs in which the wrist joints barely move: some directions are hardly excited. Errors
    # against an extended-precision solution of the stacked problem: the automatic route is no
    # worse than QR of every chunk. With little noise the centre is good and the Gram route is
    # taken; with much noise its error bound is too large and every chunk goes through QR.
    scale = np.array([1, 1, 1, wrist, wrist, wrist])
    _, (q, dq, ddq, tau) = _log(ur5, 3000, 3, noise, scale=scale)
    ref = _extended_lstsq(_stacked(ur5, q, dq, ddq).reshape(-1, base_parameters(ur5, TERMS).n_base), tau.reshape(-1))
    big = float(np.abs(ref).max())
    auto = Compressor(ur5, TERMS, chunk=500).add(q, dq, ddq, tau)
    house = Compressor(ur5, TERMS, chunk=500, fold="householder").add(q, dq, ddq, tau)
    err_auto = float(np.abs(_solve(auto) - ref).max()) / big
    err_house = float(np.abs(_solve(house) - ref).max()) / big
    assert (auto.folded["gram"] > 0) == gram
    assert err_auto <= 2 * err_house + 1e-15
    assert err_house < 1e-10  # the reference itself is far more accurate than both


def test_failed_accuracy_check_refolds_by_householder(ur5):
    # A second log of an arm twice as heavy: its residuals around the first log's estimate are large, the
    # a-posteriori bound of the Gram fold fails, and those blocks are folded again by QR.
    truth, log1 = _log(ur5, 4000, 3, 0.05)
    heavy = truth.copy()
    heavy[: 10 * ur5.n] *= 2.0
    _, log2 = _log(ur5, 4000, 4, 0.05, truth=heavy)
    auto = Compressor(ur5, TERMS, chunk=500).add(*log1).add(*log2)
    house = Compressor(ur5, TERMS, chunk=500, fold="householder").add(*log1).add(*log2)
    assert auto.folded["refolded"] > 0
    ref = _solve(house)
    assert np.abs(_solve(auto) - ref).max() <= 1e-10 * np.abs(ref).max()


def test_term_signals(ur5):
    _, (q, dq, ddq, tau) = _log(ur5, 3000, 5, 0.05)
    default = np.stack([dq, np.sign(dq), ddq], axis=2)
    a = Compressor(ur5, TERMS, chunk=500).add(q, dq, ddq, tau)
    b = Compressor(ur5, TERMS, chunk=500).add(q, dq, ddq, tau, term_signals=default)
    for Ta, Tb in zip(a.triangles, b.triangles):
        np.testing.assert_array_equal(Ta, Tb)
    # A smooth sign for the Coulomb column: the triangles are those of the regressor with that
    # column (compared with lstsq on the stacked matrix built column by column).
    smooth = np.stack([dq, np.tanh(dq / 0.05), ddq], axis=2)
    comp = Compressor(ur5, TERMS, chunk=500).add(q, dq, ddq, tau, term_signals=smooth)
    ref, rss, *_ = scipy.linalg.lstsq(_stacked(ur5, q, dq, ddq, smooth).reshape(-1, comp.n_base), tau.reshape(-1))
    assert np.abs(_solve(comp) - ref).max() <= 1e-10 * np.abs(ref).max()
    assert comp.reduce().rho ** 2 == pytest.approx(float(rss), rel=1e-10)
    with pytest.raises(DataError, match="log7: term_signals has shape"):
        Compressor(ur5, TERMS).add(q, dq, ddq, tau, source="log7", term_signals=smooth[:, :, :2])
    bad = smooth.copy()
    bad[12, 1, 2] = np.nan
    with pytest.raises(DataError, match="term_signals: non-finite value at sample 12, joint shoulder_lift_joint, term ia"):
        Compressor(ur5, TERMS).add(q, dq, ddq, tau, term_signals=bad)
    with pytest.raises(IdentError, match="fold"):
        Compressor(ur5, TERMS, fold="cholesky")


def test_threads_give_identical_triangles(ur5):
    # Samples are independent: spreading them over numba's threads changes no bit.
    _, (q, dq, ddq, tau) = _log(ur5, 5000, 6, 0.05)
    out = []
    for mode in ("off", "on"):
        previous = kernels.set_threading(mode)
        try:
            out.append(Compressor(ur5, TERMS).add(q, dq, ddq, tau).triangles)
        finally:
            kernels.set_threading(previous)
    for Ta, Tb in zip(*out):
        np.testing.assert_array_equal(Ta, Tb)


def test_merged_gram_compressors_equal_one(ur5):
    # Fleet use: compressors of separate logs merged afterwards give the one-compressor estimate.
    _, log1 = _log(ur5, 3000, 7, 0.05)
    _, log2 = _log(ur5, 3000, 8, 0.05)
    one = Compressor(ur5, TERMS, chunk=500).add(*log1).add(*log2)
    merged = Compressor(ur5, TERMS, chunk=500).add(*log1).merge(Compressor(ur5, TERMS, chunk=500).add(*log2))
    assert merged.folded["gram"] > 0
    ref = _solve(one)
    assert np.abs(_solve(merged) - ref).max() <= 1e-10 * np.abs(ref).max()
    np.testing.assert_allclose(merged.joint_rss(ref), one.joint_rss(ref), rtol=1e-10)
    assert fit_compressed(merged, "ols").samples == 6000


@pytest.mark.parametrize("arm", ["ur5", "panda"])
def test_packed_rows_equal_regressor_entries(ur5, arm):
    # The fused kernel's packed rows against the per-sample regressor (itself checked against
    # pin's joint-torque regressor in test_regressor.py): each kept equation's row holds the
    # regressor's base-column entries bit for bit, left-out equations are absent and the centred
    # torque is tau - Y_b beta_c; with threads too.
    robot = ur5 if arm == "ur5" else ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)
    rng = np.random.default_rng(11)
    m = 1007
    q = rng.uniform(-2.5, 2.5, (m, robot.n))
    dq, ddq, tau = (rng.standard_normal(q.shape) for _ in range(3))
    keep = rng.random(q.shape) > 0.2
    comp = Compressor(robot, TERMS)
    center = rng.standard_normal(comp.n_base)
    Yb = _stacked(robot, q, dq, ddq)  # (m, n, b)
    for mode in ("off", "on"):
        previous = kernels.set_threading(mode)
        try:
            blocks = comp._pack(q, dq, ddq, tau, keep, None, 0, m, center)
        finally:
            kernels.set_threading(previous)
        for j, cols in enumerate(comp.columns):
            A, kj = blocks[j], keep[:, j]
            assert A.shape == (kj.sum(), cols.size + 1)
            np.testing.assert_array_equal(A[:, :-1], Yb[kj, j][:, cols])
            t = tau[kj, j] - Yb[kj, j][:, cols] @ center[cols]
            np.testing.assert_allclose(A[:, -1], t, rtol=1e-12, atol=1e-12 * np.abs(t).max())
