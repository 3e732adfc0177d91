"""Packing kernels specialised to one arm (ident.arm.specialise): the rows they write are bit for
bit those of the general kernel, on arms of every kind, and the compressor that switches to them
mid-log gives bit-identical triangles.

The general kernel is the reference here; it is itself checked against the reference library pin
(test_dynamics_reference.py: regressor to 1e-9 on these same descriptions) and its packed rows
against the regressor's entries (test_compress_fused.py). The descriptions are the ones shipped by
the `example-robot-data` package: a z-axis chain with frames turned by right angles (panda), a
chain with y axes (ur5), an oblique axis (romeo's hand), and three branches with a prismatic joint
and locked joints merged into their parents (baxter).
"""

from __future__ import annotations

import os
import warnings

import numpy as np
import pytest
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident
from ident import Compressor
from ident.arm import kernels, specialise
from ident.arm.base import random_states
from ident.arm.dynamics import term_columns
from ident.arm.pack import pack_chunk

TERMS = ("fv", "fc", "ia")
ROMEO = "romeo_description/urdf/romeo.urdf"
ROMEO_ARM = ["TrunkYaw", "LShoulderPitch", "LShoulderYaw", "LElbowRoll", "LElbowYaw", "LWristRoll", "LWristYaw", "LWristPitch", "LHand"]
BAXTER = "baxter_description/urdf/baxter.urdf"
BAXTER_JOINTS = ["head_pan", "left_s0", "left_s1", "left_e0", "left_e1", "left_w0", "left_w1", "left_w2", "right_s0", "l_gripper_l_finger_joint"]
BAXTER_LOCKED = {"l_gripper_r_finger_joint": -0.01, "right_s1": 0.4, "right_e1": 1.1, "right_w1": -0.7}
ARMS = {
    "panda": (PANDA, None, PANDA_FINGERS_LOCKED),
    "ur5": (UR5, None, None),
    "romeo_arm": (ROMEO, ROMEO_ARM, None),
    "baxter_branches": (BAXTER, BAXTER_JOINTS, BAXTER_LOCKED),
}


@pytest.fixture(scope="module")
def compiled():
    """Each arm's compressor and compiled kernel; the compilations run side by side in helper processes."""
    comps = {}
    for name, (rel, joints, locked) in ARMS.items():
        comps[name] = Compressor(ident.load_robot(erd_path(rel), joints=joints, locked=locked), TERMS)
        comps[name].specialised_kernel()  # starts the helper, returns at once
    return {name: (c, c.specialised_kernel(wait=True)) for name, c in comps.items()}


def _pack_both(comp, mod, states, tau, keep, center, threads):
    kept, nrigid, tsrc, ncol, kargs = comp._layout()
    q, dq, ddq = states
    n, m = comp.robot.n, q.shape[0]
    sig = term_columns(TERMS, dq, ddq)
    cm = comp._center_matrix(center)
    size = m * int((ncol + 1).sum())
    out = []
    for special in (False, True):
        buf = np.full(size, np.nan)
        counts, offs = np.empty(n, np.int64), np.empty(n, np.int64)
        previous = kernels.set_threading("on" if threads else "off")
        try:
            if special:
                specialise.pack_rows(mod, q, dq, ddq, tau, sig, keep, cm, center is not None, tsrc, ncol, buf, counts, offs)
            else:
                pack_chunk(q, dq, ddq, tau, sig, keep, cm, center is not None, *kargs, kept, nrigid, tsrc, ncol, buf, counts, offs)
        finally:
            kernels.set_threading(previous)
        used = int(offs[-1] + counts[-1] * (ncol[-1] + 1))
        out.append((buf[:used], counts, offs))
    return out


@pytest.mark.parametrize("arm", list(ARMS))
def test_specialised_rows_equal_the_general_kernel_bit_for_bit(compiled, arm):
    comp, mod = compiled[arm]
    assert mod is not None, f"{arm}: no specialised kernel"
    rng = np.random.default_rng(3)
    states = random_states(comp.robot, 1500, rng)
    tau = rng.standard_normal(states[0].shape)
    keep = rng.random(states[0].shape) > 0.2
    centre = rng.standard_normal(comp.n_base)
    for center, threads in ((None, False), (centre, False), (centre, True)):
        (g, gc, go), (s, sc, so) = _pack_both(comp, mod, states, tau, keep, center, threads)
        assert np.array_equal(gc, sc) and np.array_equal(go, so)
        assert not np.isnan(s).any()
        assert np.array_equal(g, s), f"{arm}: rows differ (centred {center is not None}, threads {threads})"


def test_the_same_arm_gives_the_same_source_so_the_cache_is_reused(compiled):
    comp, _ = compiled["panda"]
    kept, nrigid, _, ncol, kargs = comp._layout()
    assert specialise.source(*kargs, kept, nrigid, ncol) == comp._special_text
    other = kept.copy()
    other[6, 9] = 0  # another base set is another kernel
    assert specialise.source(*kargs, other, nrigid, ncol) != comp._special_text


def test_compressor_switching_to_the_specialised_kernel_gives_the_same_triangles(compiled, monkeypatch):
    comp_ur5, _ = compiled["ur5"]
    robot = comp_ur5.robot
    rng = np.random.default_rng(11)
    q, dq, ddq = random_states(robot, 30000, rng)
    tau = ident.predict(robot, q, dq, ddq, robot.prior.ravel()) + 0.05 * rng.standard_normal(q.shape)
    keep = np.abs(dq) > 0.05
    results = []
    for flag in ("0", "1"):
        monkeypatch.setenv("IDENT_SPECIALISE", flag)
        monkeypatch.setattr(specialise, "SPECIALISE_FROM", 10000)
        c = Compressor(robot, TERMS, chunk=1024)
        c.add(q[:5000], dq[:5000], ddq[:5000], tau[:5000], keep=keep[:5000])  # below the threshold: general kernel
        c.add(q[5000:], dq[5000:], ddq[5000:], tau[5000:], keep=keep[5000:])  # above it: the arm's kernel
        results.append(c)
    general, special = results
    assert special.folded == general.folded and special.folded["gram"] > 0
    for Tg, Ts in zip(general.triangles, special.triangles):
        assert np.array_equal(Tg, Ts)
    for Bg, Bs in zip(general.blocks.blocks, special.blocks.blocks):
        assert all(np.array_equal(a, b) for a, b in zip(Bg, Bs))


def test_a_failed_compilation_warns_and_leaves_the_general_kernel():
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert specialise.kernel("raise ValueError('no kernel in here')\n", wait=True) is None
    assert any("ValueError: no kernel in here" in str(w.message) for w in caught)


def test_a_kernel_another_process_compiles_is_waited_for_not_compiled_twice():
    text = "# test module\nrows = 42\n"
    path = specialise._module_path(text)
    lock = specialise._lock(path)
    lock.touch()  # another process holds the compilation
    try:
        assert specialise.kernel(text) is None
        assert specialise.kernel(text) is None  # still waiting, nothing started here
    finally:
        lock.unlink()
    # the other process went away without a result: this one compiles it
    mod = specialise.kernel(text, wait=True)
    assert mod is not None and mod.rows == 42
    assert not lock.exists()


def test_specialised_kernels_can_be_turned_off(monkeypatch):
    monkeypatch.setenv("IDENT_SPECIALISE", "off")
    assert not specialise.enabled()
    monkeypatch.setenv("IDENT_SPECIALISE", "1")
    assert specialise.enabled()


def test_a_lock_left_by_a_dead_process_is_taken_over():
    text = "# test module, stale lock\nrows = 7\n"
    path = specialise._module_path(text)
    lock = specialise._lock(path)
    lock.touch()
    old = lock.stat().st_mtime - 2 * specialise.COMPILE_WAIT
    os.utime(lock, (old, old))
    mod = specialise.kernel(text, wait=True)
    assert mod is not None and mod.rows == 7
    assert not lock.exists()
