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
from ident.arm.spatial import from_pseudo_inertia, pseudo_inertia
from ident.cli import main
from ident.errors import IdentError
from ident.handover.export import export_urdf, export_urdf_text
from ident.handover.paramfile import parameter_set_from_dict, save_parameters

DEMO_URDF = Path(__file__).resolve().parents[1] / "datasets_demo" / "sprout6.urdf"
INERTIAL = re.compile(r"<inertial\b.*?</inertial\s*>", re.S)


def perturbed(robot, seed=0):
    """Physically consistent parameters different from the description: J -> A J A^T keeps J positive definite."""
    rng = np.random.default_rng(seed)
    J = pseudo_inertia(robot.prior)
    A = np.eye(4) + 0.1 * rng.normal(size=(robot.n, 4, 4))
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


@pytest.mark.parametrize("rel,locked", CASES)
def test_exported_urdf_matches_identified_model_in_pin(tmp_path, rel, locked):
    path = DEMO_URDF if rel == "demo" else erd_path(rel)
    robot = ident.load_robot(path, locked=locked)
    pi = perturbed(robot)
    ps = parameter_set_from_vector(robot, pi)
    out = tmp_path / "identified.urdf"
    export_urdf(path, robot, ps, out)
    # our own reader gives back the same bodies
    again = ident.load_robot(out, locked=locked)
    assert np.allclose(again.prior, pi, rtol=1e-12, atol=1e-15)
    # reference library: pin's inverse dynamics of the exported file equal the identified model's to 1e-9 rel.
    pin, model = pin_model(out, locked)
    data = model.createData()
    assert [model.names[i] for i in range(1, model.njoints)] == robot.joint_names
    rng = np.random.default_rng(1)
    q = rng.uniform(np.maximum(robot.lower, -3), np.minimum(robot.upper, 3), size=(50, robot.n))
    dq, ddq = rng.normal(size=(2, 50, robot.n))
    ours = ident.inverse_dynamics(robot, q, dq, ddq, pi)
    ref = np.array([pin.rnea(model, data, q[k], dq[k], ddq[k]) for k in range(50)])
    assert np.abs(ours - ref).max() <= 1e-9 * np.abs(ref).max()


def test_everything_but_the_inertials_is_kept_byte_for_byte(tmp_path):
    robot = ident.load_robot(DEMO_URDF)
    text = DEMO_URDF.read_text()
    new = export_urdf_text(text, robot, parameter_set_from_vector(robot, perturbed(robot, 2)))
    # the fixed base keeps its inertial; the merged gripper's moves to the flange (a marker comment is left)
    markers = r"<!-- identified by ident[^>]*-->\n[ \t]*|<!-- inertial moved to[^>]*-->"
    assert INERTIAL.sub("", text) == re.sub(markers, "", INERTIAL.sub("", new))
    assert "inertial moved to link 'flange'" in new
    assert new.count("<inertial>") == text.count("<inertial>") - 1


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
    assert np.allclose(ident.load_robot(out).prior, pi, rtol=1e-12)
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
    assert np.allclose(model.damping, fv, rtol=1e-15) and np.allclose(model.friction, fc, rtol=1e-15)
    text = out.read_text()
    assert text.count("<dynamics") == robot.n
    if rel == UR5:  # transmissions untouched
        src = path.read_text()
        tr = re.compile(r"<transmission\b.*?</transmission>", re.S)
        assert tr.findall(src) == tr.findall(text)
