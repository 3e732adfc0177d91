"""Base parameters: invariance, known counts and the reference library's rank."""

from __future__ import annotations

import json

import numpy as np
import pinocchio as pin
import pytest
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident
from ident.arm.base import SamplingWarning, base_parameters, random_states
from ident.arm.regressor import regressor
from ident.cli import main

PLANAR_2R = """<?xml version="1.0"?>
<robot name="planar2r">
  <link name="base"/>
  <link name="l1"><inertial><origin xyz="0.2 0 0.01"/><mass value="2.0"/>
    <inertia ixx="0.01" ixy="0" ixz="0" iyy="0.03" iyz="0" izz="0.035"/></inertial></link>
  <link name="l2"><inertial><origin xyz="0.15 0.01 0"/><mass value="1.0"/>
    <inertia ixx="0.005" ixy="0" ixz="0" iyy="0.01" iyz="0" izz="0.012"/></inertial></link>
  <joint name="j1" type="revolute"><parent link="base"/><child link="l1"/>
    <origin rpy="1.5707963267948966 0 0"/><axis xyz="0 0 1"/>
    <limit lower="-3" upper="3" velocity="3" effort="50"/></joint>
  <joint name="j2" type="revolute"><parent link="l1"/><child link="l2"/>
    <origin xyz="0.4 0 0"/><axis xyz="0 0 1"/>
    <limit lower="-3" upper="3" velocity="3" effort="30"/></joint>
</robot>
"""


def _pin_rank(path, robot, q, dq, ddq, locked=None):
    """Rank of pin's own joint-torque regressor stacked over the same states (reference library)."""
    full = pin.buildModelFromUrdf(str(path))
    if locked:
        q0 = pin.neutral(full)
        for name, val in locked.items():
            q0[full.joints[full.getJointId(name)].idx_q] = val
        model = pin.buildReducedModel(full, [full.getJointId(n) for n in locked], q0)
    else:
        model = full
    data = model.createData()
    idx = [model.joints[model.getJointId(n)].idx_v for n in robot.joint_names]
    rows = []
    for s in range(q.shape[0]):
        qq, vv, aa = (np.zeros(model.nv) for _ in range(3))
        qq[idx], vv[idx], aa[idx] = q[s], dq[s], ddq[s]
        rows.append(pin.computeJointTorqueRegressor(model, data, qq, vv, aa).copy())
    W = np.vstack(rows)
    norms = np.linalg.norm(W, axis=0)
    live = norms > 1e-10 * norms.max()  # round-off columns would turn into noise when scaled
    s = np.linalg.svd(W[:, live] / norms[live], compute_uv=False)
    return int(np.sum(s > 1e-8 * s[0]))


@pytest.fixture(scope="module")
def planar(tmp_path_factory):
    path = tmp_path_factory.mktemp("planar") / "planar2r.urdf"
    path.write_text(PLANAR_2R)
    return ident.load_robot(path)


def test_planar_2r_vertical_plane_has_six_base_parameters(planar):
    # Textbook fact (from memory): a 2R arm moving in a vertical plane has 6 base inertial
    # parameters (per link: zz and the two in-plane first moments; m2 regroups into link 1).
    b = base_parameters(planar)
    assert b.n_base == 6


@pytest.mark.parametrize("rel, locked, expected", [(UR5, None, 36), (PANDA, PANDA_FINGERS_LOCKED, 43)])
def test_counts_match_reference_library_rank(rel, locked, expected):
    # Expected counts: 36 for the 6R industrial layout and 43 for the 7R layout (usual textbook
    # counts, from memory), confirmed by the rank of pin's regressor stacked over the same states.
    path = erd_path(rel)
    robot = ident.load_robot(path, locked=locked)
    assert base_parameters(robot).n_base == expected
    q, dq, ddq = random_states(robot, 150, np.random.default_rng(11))
    assert base_parameters(robot, states=(q, dq, ddq)).n_base == expected
    assert _pin_rank(path, robot, q, dq, ddq, locked) == expected


def test_planar_count_matches_reference_library_rank(planar, tmp_path):
    # the reference library pin, on the same URDF and the same states, agrees on 6
    path = tmp_path / "planar2r.urdf"
    path.write_text(PLANAR_2R)
    q, dq, ddq = random_states(planar, 100, np.random.default_rng(12))
    assert base_parameters(planar, states=(q, dq, ddq)).n_base == 6
    assert _pin_rank(path, planar, q, dq, ddq) == 6


def test_random_states_cover_whole_range_within_limits(tmp_path):
    # Gautier's method needs states over the whole range: limited joints stay inside their limits,
    # a continuous joint covers a full turn, velocities and accelerations stay within the bounds.
    path = tmp_path / "mixed.urdf"
    path.write_text(PLANAR_2R.replace('type="revolute"><parent link="l1"', 'type="continuous"><parent link="l1"'))
    robot = ident.load_robot(path)
    q, dq, ddq = random_states(robot, 2000, np.random.default_rng(8))
    assert q.shape == dq.shape == ddq.shape == (2000, 2)
    assert q[:, 0].min() >= -3 and q[:, 0].max() <= 3 and np.ptp(q[:, 0]) > 0.95 * 6
    assert np.ptp(q[:, 1]) > 0.95 * 2 * np.pi and np.abs(q[:, 1]).max() <= np.pi
    assert np.abs(dq[:, 0]).max() <= 3 and np.abs(ddq[:, 0]).max() <= 6
    again = random_states(robot, 2000, np.random.default_rng(8))
    assert all(np.array_equal(a, b) for a, b in zip((q, dq, ddq), again))


def test_same_seed_gives_the_same_result_without_the_cache(ur5):
    from ident.arm import base

    a = base_parameters(ur5, "fv,ia", seed=6)
    base._CACHE.clear()
    b = base_parameters(ur5, "fv,ia", seed=6)
    assert a is not b
    assert np.array_equal(a.independent, b.independent) and np.array_equal(a.K, b.K)
    assert a.relations() == b.relations()


def test_bad_requests_are_refused(ur5, capsys):
    with pytest.raises(ident.IdentError, match="seed: expected a non-negative integer, got -1"):
        base_parameters(ur5, seed=-1)
    # 5 states x 6 joints = 30 equations cannot reveal 36 base parameters: refuse, not under-count
    with pytest.raises(ident.IdentError, match="n_states: 5 states give fewer equations than the 60 regressor columns; use at least 10"):
        base_parameters(ur5, n_states=5)
    assert main(["model", str(erd_path(UR5)), "--base", "--seed", "-1"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "seed" in err


def test_base_regressor_reproduces_full_torque(ur5):
    b = base_parameters(ur5, "all")
    rng = np.random.default_rng(5)
    q, dq, ddq = random_states(ur5, 200, rng)  # fresh states, not those of the computation
    Y = regressor(ur5, q, dq, ddq, "all")
    for _ in range(3):
        pi = rng.normal(size=b.n_full)
        full = Y @ pi
        assert np.allclose(b.columns(Y) @ b.project(pi), full, rtol=0, atol=1e-10 * np.abs(full).max())
        assert np.allclose(b.projection @ pi, b.project(pi))


def test_base_set_does_not_depend_on_seed(panda):
    a = base_parameters(panda, "fv,fc,ia", seed=1)
    c = base_parameters(panda, "fv,fc,ia", seed=2)
    assert np.array_equal(a.independent, c.independent)
    assert np.array_equal(a.regrouped, c.regrouped)
    assert np.allclose(a.K, c.K, atol=1e-8)


def test_cached_per_robot_and_terms(ur5):
    assert base_parameters(ur5, "fv,ia") is base_parameters(ur5, ("ia", "viscous"))
    assert base_parameters(ur5, "fv") is not base_parameters(ur5, "fv,ia")


def test_first_joint_armature_regroups_with_first_link_zz(ur5):
    # Classical regrouping (see e.g. Khalil and Dombre 2002): with a vertical first axis the rotor
    # inertia of joint 1 only ever appears beside the first link's zz.
    b = base_parameters(ur5, "ia")
    names = b.full_names
    first = names.index("shoulder_pan_joint.ia")
    assert first in b.regrouped
    row = b.K[:, list(b.regrouped).index(first)]
    (i,) = np.flatnonzero(np.abs(row) > 1e-9)
    assert names[b.independent[i]] == "shoulder_link.zz"
    assert row[i] == pytest.approx(1.0, abs=1e-9)
    assert any(r.startswith("shoulder_link.zzR = shoulder_link.zz") and "shoulder_pan_joint.ia" in r for r in b.relations())


def test_relations_print_exact_parallel_axis_coefficients(planar):
    # Parallel-axis regrouping of the planar arm (textbook form): zz1R = zz1 + l1^2 m2 with l1 = 0.4 m.
    rel = base_parameters(planar).relations()
    assert "l1.zzR = l1.zz + 0.16*l2.m" in rel
    assert "l1.mxR = l1.mx + 0.4*l2.m" in rel


def test_relations_print_exact_products_of_link_lengths(ur5):
    # Link offsets from ur5_robot.urdf's joint origins: shoulder 0.13585 m, elbow -0.1197 m and
    # wrist 2 0.093 m along y, upper arm 0.425 m and forearm 0.39225 m along z. The usual regrouping
    # (Khalil and Dombre 2002): mass carried by a parallel axis adds length^2 * m to the
    # inertia, and a perpendicular next axis moves the next link's yy into xx.
    rel = {r.split(" = ")[0]: r for r in base_parameters(ur5).relations()}
    y = 0.13585 - 0.1197 + 0.093
    assert f" + {y**2:.10g}*wrist_2_link.m " in rel["shoulder_link.zzR"] and f"{y**2:.10g}" == "0.0119137225"
    assert f" + {(0.13585 - 0.1197) ** 2:.10g}*forearm_link.m " in rel["shoulder_link.zzR"]
    assert " + 0.180625*forearm_link.m " in rel["upper_arm_link.xxR"]  # 0.425^2
    assert " + 0.1538600625*wrist_1_link.m " in rel["forearm_link.xxR"]  # 0.39225^2
    assert " - 0.03647925*wrist_2_link.m " in rel["forearm_link.yzR"]  # 0.39225 * 0.093
    assert rel["wrist_2_link.xxR"] == "wrist_2_link.xxR = wrist_2_link.xx - wrist_2_link.yy + wrist_3_link.zz"


def test_structurally_zero_columns_listed(ur5):
    b = base_parameters(ur5)
    zero = {b.full_names[c] for c in b.zero}
    # The first link only turns about its z axis: nothing but its zz can act on the torques.
    assert {"shoulder_link.m", "shoulder_link.mx", "shoulder_link.xx"} <= zero
    assert "shoulder_link.zz" not in zero


def test_narrow_sampling_is_detected(ur5):
    q, dq, ddq = random_states(ur5, 300, np.random.default_rng(3))
    q[:, 2] = 0.3  # elbow held still
    dq[:, 2] = ddq[:, 2] = 0.0
    with pytest.warns(SamplingWarning, match="elbow_joint"):
        b = base_parameters(ur5, states=(q, dq, ddq))
    assert any("elbow_joint" in w for w in b.warnings)
    # too few states: warned, and the rank trouble is reported rather than a short base set returned
    with pytest.warns(SamplingWarning) as caught, pytest.raises(ident.NumericalError, match="from pivoted QR differs"):
        base_parameters(ur5, states=(q[:5], dq[:5], ddq[:5]))
    assert any("5 states give 30 equations for 60 regressor columns" in str(w.message) for w in caught)


def test_cli_base_table_and_json(capsys):
    path = str(erd_path(UR5))
    assert main(["model", path, "--base", "--terms", "fv,fc,fo,ia"]) == 0
    out = capsys.readouterr().out
    assert "base parameters: 58 of 84" in out
    # every term: the direction-dependent Coulomb columns [v > 0] and -[v < 0] span the same space as
    # sign(v) and 1 (fc = fcp + fcn, fo = fcp - fcn, a fact of the definitions), so only the three
    # low-speed shape columns per joint add: 58 + 6 x 3 = 76 of 84 + 6 x 5 = 114
    assert main(["model", path, "--base", "--terms", "all"]) == 0
    assert "base parameters: 76 of 114" in capsys.readouterr().out
    assert main(["model", path, "--base", "--terms", "fv,fc,fo,ia"]) == 0
    out = capsys.readouterr().out
    assert "shoulder_link.zzR" in out
    zero_line = next(line for line in out.splitlines() if line.startswith("never affect the torque"))
    assert "shoulder_link.m," in zero_line and "shoulder_link.zz" not in zero_line
    assert main(["model", path, "--base", "--terms", "fv,fc", "--format", "json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["base"]["base_count"] == 36 + 12
    assert data["base"]["counts_by_kind"] == {"inertial": 36, "fv": 6, "fc": 6}
    assert data["parameters"]["total"] == 60 + 12
