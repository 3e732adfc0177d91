"""URDF export: the reference library `pin` loads the exported file and agrees with the identified model."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
import yaml
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident
from ident.arm.parameters import parameter_set_from_vector
from ident.arm.spatial import check_physical, from_pseudo_inertia, pseudo_inertia
from ident.cli import main
from ident.errors import IdentError
from ident.handover.export import export_urdf, export_urdf_text
from ident.handover.paramfile import parameter_set_from_dict, save_parameters

DEMO_URDF = Path(__file__).resolve().parents[1] / "datasets_demo" / "sprout6.urdf"
INERTIAL = re.compile(r"<inertial\b.*?</inertial\s*>", re.S)


def perturbed(robot, seed=0, scale=0.1):
    """Physically consistent parameters different from the description: J -> A J A^T keeps J positive definite."""
    rng = np.random.default_rng(seed)
    J = pseudo_inertia(robot.prior)
    A = np.eye(4) + scale * rng.normal(size=(robot.n, 4, 4))
    return from_pseudo_inertia(A @ J @ np.swapaxes(A, 1, 2))


def pin_model(path, locked=None):
    pin = pytest.importorskip("pinocchio")
    model = pin.buildModelFromUrdf(str(path))
    if locked:
        q0 = pin.neutral(model)
        for name, val in locked.items():
            q0[model.joints[model.getJointId(name)].idx_q] = val
        model = pin.buildReducedModel(model, [model.getJointId(n) for n in locked], q0)
    return pin, model


CASES = [
    (UR5, None),  # 6-joint industrial arm
    (PANDA, PANDA_FINGERS_LOCKED),  # 7 joints; the locked fingers merge into the hand body
    ("demo", None),  # our demo arm: a gripper fixed to the flange (merged body)
]


def _pin_torques(path, locked, robot, seed=1, N=50):
    pin, model = pin_model(path, locked)
    data = model.createData()
    assert [model.names[i] for i in range(1, model.njoints)] == robot.joint_names
    rng = np.random.default_rng(seed)
    q = rng.uniform(np.maximum(robot.lower, -3), np.minimum(robot.upper, 3), size=(N, robot.n))
    dq, ddq = rng.normal(size=(2, N, robot.n))
    return (q, dq, ddq), np.array([pin.rnea(model, data, q[k], dq[k], ddq[k]) for k in range(N)])


@pytest.mark.parametrize("rel,locked", CASES)
def test_exported_urdf_matches_identified_model_in_pin(tmp_path, rel, locked):
    path = DEMO_URDF if rel == "demo" else erd_path(rel)
    robot = ident.load_robot(path, locked=locked)
    pi = perturbed(robot)
    ps = parameter_set_from_vector(robot, pi)
    for digits, tol in ((12, 1e-9), (7, 1e-6)):
        out = tmp_path / f"identified{digits}.urdf"
        export_urdf(path, robot, ps, out, digits=digits)
        # reference library: pin's inverse dynamics of the exported file equal the identified model's,
        # to 1e-9 relative with 12 digits; the default 7 digits cost at most 1e-6 relative
        (q, dq, ddq), ref = _pin_torques(out, locked, robot)
        ours = ident.inverse_dynamics(robot, q, dq, ddq, pi)
        assert np.abs(ours - ref).max() <= tol * np.abs(ref).max()
        # our own reader sees the same torques too, and every link is physical
        again = ident.load_robot(out, locked=locked)
        for i, body in enumerate(again.body_names):
            check_physical(again.prior[i], body)


def test_panda_exported_with_fingers_locked_simulates_the_gripper(tmp_path):
    """The fingers were locked for identification; in the exported file they move, so the full
    model (fingers included) must have a positive-definite mass matrix (checked with pin)."""
    pin = pytest.importorskip("pinocchio")
    path = erd_path(PANDA)
    robot = ident.load_robot(path, locked=PANDA_FINGERS_LOCKED)
    src = path.read_text()
    for scale in (0.02, 0.1):  # small change: split back; large change: the hand is folded onto link7
        pi = perturbed(robot, 5, scale)
        out = tmp_path / f"panda{scale}.urdf"
        notes = export_urdf(path, robot, parameter_set_from_vector(robot, pi), out, digits=12)
        text = out.read_text()
        # the fingers keep their description inertials byte for byte
        for finger in ("panda_leftfinger", "panda_rightfinger"):
            block = re.compile(rf'<link name="{finger}">.*?</link>', re.S)
            assert INERTIAL.findall(block.search(src).group(0)) == INERTIAL.findall(block.search(text).group(0))
        assert (not any("folded" in n for n in notes)) == (scale == 0.02)
        model = pin.buildModelFromUrdf(str(out))
        data = model.createData()
        orig = pin.buildModelFromUrdf(str(path))
        odata = orig.createData()
        rng = np.random.default_rng(2)
        for _ in range(100):  # random states including the fingers
            q = pin.randomConfiguration(model)
            M = pin.crba(model, data, q)
            assert np.linalg.eigvalsh(0.5 * (M + M.T)).min() > 1e-4
            Mo = pin.crba(orig, odata, q)
            # finger rows: the description's hand and fingers, so those entries equal the original's
            assert np.allclose(M[7:, 7:], Mo[7:, 7:], rtol=1e-9, atol=1e-12) or scale == 0.1
        assert rng is not None
        # the arm's dynamics with the fingers at the lock positions are the identified model's
        (q, dq, ddq), ref = _pin_torques(out, PANDA_FINGERS_LOCKED, robot)
        ours = ident.inverse_dynamics(robot, q, dq, ddq, pi)
        assert np.abs(ours - ref).max() <= 1e-9 * np.abs(ref).max()


def test_everything_but_the_inertials_is_kept_byte_for_byte(tmp_path):
    robot = ident.load_robot(DEMO_URDF)
    text = DEMO_URDF.read_text()
    markers = r"<!-- identified by ident[^>]*-->\n[ \t]*|<!-- inertial moved to[^>]*-->"
    # (a) the flange body came out 80 g heavier (say a cable) near its centre of mass: split back, the
    # gripper merged into it by a fixed joint keeps its own inertial and only the flange changes
    pi = robot.prior.copy()
    k = robot.body_names.index("flange")
    c = pi[k, 1:4] / pi[k, 0]
    pi[k] += ident.to_vector(0.08, c, np.zeros((3, 3)))
    notes = []
    new = export_urdf_text(text, robot, parameter_set_from_vector(robot, pi), notes=notes)
    assert INERTIAL.sub("", text) == re.sub(markers, "", INERTIAL.sub("", new))
    assert not any("folded" in n for n in notes) and new.count("<inertial>") == text.count("<inertial>")
    grip = re.compile(r'<link name="tray_gripper">.*?</link>', re.S)
    assert grip.search(text).group(0) == grip.search(new).group(0)
    # (b) a change the gripper's own inertial cannot absorb: the fixed gripper is folded onto the flange
    notes = []
    new = export_urdf_text(text, robot, parameter_set_from_vector(robot, perturbed(robot, 2)), notes=notes)
    assert INERTIAL.sub("", text) == re.sub(markers, "", INERTIAL.sub("", new))
    if any("folded" in n for n in notes):
        assert "inertial moved to link 'flange'" in new and new.count("<inertial>") == text.count("<inertial>") - 1


def test_unseen_parts_keep_the_description_and_numbers_are_short(tmp_path):
    path = erd_path(UR5)
    robot = ident.load_robot(path)
    pi = robot.prior.copy()
    pi[0, 0] += 2.4e-4  # shoulder_link mass: never affects a joint torque of this arm (vertical first axis)
    pi[0, 1] += 1e-20  # and a first moment at round-off level
    pi[1:] = perturbed(robot, 7)[1:]
    out = tmp_path / "ur5.urdf"
    export_urdf(path, robot, parameter_set_from_vector(robot, pi), out)
    src, text = path.read_text(), out.read_text()
    block = re.compile(r'<link name="shoulder_link">.*?</link>', re.S)
    assert block.search(src).group(0) == block.search(text).group(0)
    # every number in a rewritten inertial has at most 7 significant digits
    written = re.findall(r"<!-- identified by ident[^>]*-->\s*(<inertial\b.*?</inertial>)", text, re.S)
    assert len(written) == robot.n - 1
    for el in written:
        for num in re.findall(r'"([-+0-9.eE ]+)"', el):
            for tok in num.split():
                mant = tok.lower().split("e")[0].lstrip("+-").replace(".", "").lstrip("0")
                assert len(mant) <= 7, tok


def test_rounding_keeps_a_body_on_the_edge_physical(tmp_path):
    """A flat disc sits on the triangle inequality (Izz = Ixx + Iyy); rounding its rotated inertia
    to 7 digits would break it, so more digits are used for that link."""
    robot = ident.load_robot(DEMO_URDF)
    pi = robot.prior.copy()
    rng = np.random.default_rng(3)
    R = np.linalg.qr(rng.normal(size=(3, 3)))[0]
    I = R @ np.diag([0.01, 0.02, 0.03 * (1 - 1e-12)]) @ R.T  # a thin plate, at the edge
    pi[2] = ident.to_vector(1.3, np.array([0.01, 0.02, 0.1]), I)
    out = tmp_path / "edge.urdf"
    export_urdf(DEMO_URDF, robot, parameter_set_from_vector(robot, pi), out)
    again = ident.load_robot(out)
    check_physical(again.prior[2], "edge body")


def test_a_description_given_as_parameter_file_gets_a_hint(tmp_path, capsys):
    out = tmp_path / "x.yaml"
    assert main(["export", str(DEMO_URDF), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "is a robot description" in err and "ident prior" in err
    assert not out.exists()


def test_links_without_inertial_get_one(tmp_path):
    urdf = """<robot name="two">
  <link name="base"/>
  <link name="a"/>
  <link name="b">
    <visual><geometry><box size="0.1 0.1 0.1"/></geometry></visual>
  </link>
  <joint name="j1" type="revolute"><parent link="base"/><child link="a"/><axis xyz="0 0 1"/>
    <limit lower="-1" upper="1" effort="1" velocity="1"/></joint>
  <joint name="j2" type="revolute"><parent link="a"/><child link="b"/><origin xyz="0.3 0 0"/><axis xyz="0 1 0"/>
    <limit lower="-1" upper="1" effort="1" velocity="1"/></joint>
</robot>
"""
    src = tmp_path / "two.urdf"
    src.write_text(urdf)
    robot = ident.load_robot(src)
    pi = ident.to_vector(np.array([1.0, 2.0]), np.array([[0.1, 0, 0], [0, 0.05, 0.02]]),
                         np.array([np.diag([0.01, 0.02, 0.025]), np.diag([0.003, 0.004, 0.005])]))
    out = tmp_path / "out.urdf"
    export_urdf(src, robot, parameter_set_from_vector(robot, pi), out)
    again = ident.load_robot(out)
    # b.my (first moment along b's own joint axis) never affects a torque: it keeps the description's 0
    expect = pi.copy()
    expect[1, 2] = 0.0
    assert np.allclose(again.prior, expect, rtol=1e-12)
    rng = np.random.default_rng(0)
    q, dq, ddq = rng.uniform(-1, 1, size=(3, 20, 2))
    assert np.allclose(ident.inverse_dynamics(again, q, dq, ddq), ident.inverse_dynamics(robot, q, dq, ddq, pi), rtol=1e-12, atol=1e-12)
    assert '<box size="0.1 0.1 0.1"/>' in out.read_text()


def test_physically_invalid_parameters_are_refused(tmp_path, capsys):
    robot = ident.load_robot(DEMO_URDF)
    pi = robot.prior.copy()
    pi[2, 4] = -0.5  # forearm xx about the origin far below zero: no mass distribution has it
    params = tmp_path / "bad.yaml"
    save_parameters(params, parameter_set_from_vector(robot, pi))
    with pytest.raises(IdentError, match="forearm"):
        export_urdf(DEMO_URDF, robot, parameter_set_from_vector(robot, pi), tmp_path / "x.urdf")
    out = tmp_path / "out.urdf"
    assert main(["export", str(params), "--urdf", str(DEMO_URDF), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "cannot export link 'forearm'" in err
    assert not out.exists() and not any(p.name.startswith(".out.urdf") for p in tmp_path.iterdir())


def test_json_and_yaml_exports_round_trip(tmp_path, capsys):
    robot = ident.load_robot(DEMO_URDF)
    full = np.concatenate([perturbed(robot, 3).ravel(), np.linspace(0.1, 1.0, 3 * robot.n)])
    ps = parameter_set_from_vector(robot, full, ("fv", "fc", "ia"))
    params = tmp_path / "p.yaml"
    save_parameters(params, ps)
    for fmt, loader in (("json", json.loads), ("yaml", yaml.safe_load)):
        out = tmp_path / f"p_out.{fmt}"
        assert main(["export", str(params), "--out", str(out), "--quiet"]) == 0
        back = parameter_set_from_dict(loader(out.read_text()), str(out))
        assert np.allclose(back.vector(), full, rtol=1e-12)
    assert main(["export", str(params), "--out", str(tmp_path / "p.txt")]) == 2
    assert "--format" in capsys.readouterr().err


def test_export_of_another_robots_parameters_is_refused(tmp_path, capsys):
    panda = ident.load_robot(erd_path(PANDA), locked=PANDA_FINGERS_LOCKED)
    params = tmp_path / "panda.yaml"
    save_parameters(params, parameter_set_from_vector(panda, panda.prior.ravel()))
    out = tmp_path / "x.urdf"
    assert main(["export", str(params), "--urdf", str(DEMO_URDF), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "does not belong" in err
    assert not out.exists()


@pytest.mark.parametrize("rel", [UR5, "demo"])  # UR5 has <dynamics> and <transmission> joints; the demo arm has neither
def test_friction_export_is_read_by_pin(tmp_path, rel):
    path = DEMO_URDF if rel == "demo" else erd_path(rel)
    robot = ident.load_robot(path)
    fv, fc, ia = np.linspace(0.1, 0.6, robot.n), np.linspace(2.0, 0.5, robot.n), np.full(robot.n, 0.05)
    full = np.concatenate([perturbed(robot, 4).ravel(), np.column_stack([fv, fc, ia]).ravel()])
    params = tmp_path / "p.yaml"
    save_parameters(params, parameter_set_from_vector(robot, full, ("fv", "fc", "ia")))
    out = tmp_path / "with_friction.urdf"
    assert main(["export", str(params), "--urdf", str(path), "--out", str(out), "--with-friction", "--quiet"]) == 0
    # reference library: pin parses URDF <dynamics damping friction> into model.damping / model.friction
    pin, model = pin_model(out)
    assert np.allclose(model.damping, fv, rtol=5e-7) and np.allclose(model.friction, fc, rtol=5e-7)  # 7 digits
    text = out.read_text()
    assert text.count("<dynamics") == robot.n
    if rel == UR5:  # transmissions untouched
        src = path.read_text()
        tr = re.compile(r"<transmission\b.*?</transmission>", re.S)
        assert tr.findall(src) == tr.findall(text)
