"""Robot descriptions: DH files against URDF twins and the DH matrices, fixed-body merging, and
refusal of malformed or unsupported descriptions with a message naming the element."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import yaml

import ident
from ident.arm.dh import load_dh, parse_dh
from ident.arm.spatial import matrix_to_rpy
from ident.arm.urdf import parse_urdf
from ident.cli import main as cli_main

pin = pytest.importorskip("pinocchio")

EXAMPLE = Path(__file__).resolve().parents[1] / "datasets_demo" / "examples" / "glazer6_dh.yaml"
DEG, MM = np.pi / 180, 1e-3


# --- DH matrices as usually defined (a trade fact), written out independently of ident.arm.dh -------
def rot_x(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[1, 0, 0, 0], [0, c, -s, 0], [0, s, c, 0], [0, 0, 0, 1.0]])


def rot_z(t):
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, -s, 0, 0], [s, c, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1.0]])


def trans(x, y, z):
    T = np.eye(4)
    T[:3, 3] = x, y, z
    return T


def standard_dh(a, alpha, d, theta):
    """Standard DH: A_i = Rz(theta_i) Tz(d_i) Tx(a_i) Rx(alpha_i)."""
    return rot_z(theta) @ trans(0, 0, d) @ trans(a, 0, 0) @ rot_x(alpha)


def modified_dh(a, alpha, d, theta):
    """Modified DH: A_i = Rx(alpha_{i-1}) Tx(a_{i-1}) Rz(theta_i) Tz(d_i)."""
    return rot_x(alpha) @ trans(a, 0, 0) @ rot_z(theta) @ trans(0, 0, d)


def table_si(data):
    """(a, alpha, d, theta0, type) per joint in SI, from an ident-dh/1 mapping."""
    ang = DEG if data["units"]["angle"] == "deg" else 1.0
    lng = MM if data["units"]["length"] == "mm" else 1.0
    rows = []
    for j in data["joints"]:
        off = j.get("offset", 0.0)
        if j["type"] == "revolute":
            rows.append((j["a"] * lng, j["alpha"] * ang, j["d"] * lng, off * ang, "revolute"))
        else:
            rows.append((j["a"] * lng, j["alpha"] * ang, off * lng, j["theta"] * ang, "prismatic"))
    return rows


def dh_chain(rows, q, kind):
    """Base-frame poses of DH frames 1..n for joint positions q."""
    T = np.eye(4)
    out = []
    for (a, alpha, d, theta, typ), qi in zip(rows, q):
        if typ == "revolute":
            theta = theta + qi
        else:
            d = d + qi
        T = T @ (standard_dh(a, alpha, d, theta) if kind == "standard" else modified_dh(a, alpha, d, theta))
        out.append(T)
    return out


def rpy_xyz(T):
    r, p, y = (float(v) for v in matrix_to_rpy(T[:3, :3]))
    x, y_, z = (float(v) for v in T[:3, 3])
    return f'rpy="{r!r} {p!r} {y!r}" xyz="{x!r} {y_!r} {z!r}"'


def urdf_twin(data) -> str:
    """A URDF of the same arm as a DH mapping, written from the DH matrices.

    Link i's URDF frame is DH frame i-1 turned by joint i (standard) or DH frame i (modified);
    the link's inertia is given in DH frame i through the URDF <inertial> origin.
    """
    kind = data["convention"]
    rows = table_si(data)
    lng = MM if data["units"]["length"] == "mm" else 1.0
    parts = [f'<robot name="{data["name"]}_twin">', '<link name="base"/>']
    parent, to_next = "base", np.eye(4)
    for i, (row, j) in enumerate(zip(rows, data["joints"])):
        a, alpha, d, theta, typ = row
        if kind == "standard":
            # joint frame = DH frame i-1 (placed by to_next) turned by the constant part
            origin = to_next @ (rot_z(theta) if typ == "prismatic" else np.eye(4)) @ (trans(0, 0, d) if typ == "prismatic" else rot_z(theta))
            link_to_dh = (trans(0, 0, d) if typ == "revolute" else np.eye(4)) @ trans(a, 0, 0) @ rot_x(alpha)
        else:
            origin = rot_x(alpha) @ trans(a, 0, 0) @ rot_z(theta) @ trans(0, 0, d)
            link_to_dh = np.eye(4)
        name = f"L{i + 1}"
        link = j.get("link", {})
        inertial = ""
        if link:
            com = np.array(link["com"]) * lng
            T = link_to_dh @ trans(*com)
            I = [float(v) * lng**2 for v in link["inertia"]]
            inertial = (f'<inertial><origin {rpy_xyz(T)}/><mass value="{link["mass"]!r}"/>'
                        f'<inertia ixx="{I[0]!r}" ixy="{I[1]!r}" ixz="{I[2]!r}" iyy="{I[3]!r}" iyz="{I[4]!r}" izz="{I[5]!r}"/></inertial>')
        parts.append(f'<link name="{name}">{inertial}</link>')
        parts.append(f'<joint name="{j["name"]}" type="{typ}"><parent link="{parent}"/><child link="{name}"/>'
                     f'<origin {rpy_xyz(origin)}/><axis xyz="0 0 1"/><limit lower="-10" upper="10" effort="1" velocity="1"/></joint>')
        parent, to_next = name, link_to_dh if kind == "standard" else np.eye(4)
    parts.append("</robot>")
    return "\n".join(parts)


def pin_model(urdf_text, tmp_path):
    path = tmp_path / "twin.urdf"
    path.write_text(urdf_text)
    return pin.buildModelFromUrdf(str(path)), path


def compare_dh_with_twin(data, tmp_path, seed):
    dh_robot = parse_dh(data, where="test")
    model, urdf_path = pin_model(urdf_twin(data), tmp_path)
    twin = ident.load_robot(urdf_path)
    pdata = model.createData()
    rng = np.random.default_rng(seed)
    N = 60
    q = rng.uniform(-1.5, 1.5, (N, dh_robot.n))
    dq = rng.uniform(-2, 2, (N, dh_robot.n))
    ddq = rng.uniform(-4, 4, (N, dh_robot.n))
    tau = ident.inverse_dynamics(dh_robot, q, dq, ddq)
    M = ident.mass_matrix(dh_robot, q)
    np.testing.assert_allclose(tau, ident.inverse_dynamics(twin, q, dq, ddq), rtol=0, atol=1e-10 * np.abs(tau).max())
    for s in range(N):
        # reference library pin on the URDF twin
        np.testing.assert_allclose(tau[s], pin.rnea(model, pdata, q[s], dq[s], ddq[s]), rtol=0, atol=1e-10 * max(1, np.abs(tau[s]).max()))
        Mp = pin.crba(model, pdata, q[s])
        np.testing.assert_allclose(M[s], np.triu(Mp) + np.triu(Mp, 1).T, rtol=0, atol=1e-12)
    # every DH frame where the DH matrices put it
    rows = table_si(data)
    for s in range(5):
        for i, T in enumerate(dh_chain(rows, q[s], data["convention"])):
            R, p = ident.frame_pose(dh_robot, q[s], f"dh{i + 1}")
            np.testing.assert_allclose(R[0], T[:3, :3], atol=1e-13)
            np.testing.assert_allclose(p[0], T[:3, 3], atol=1e-13)
    return dh_robot


def test_example_dh_file_matches_urdf_twin_and_dh_matrices(tmp_path):
    data = yaml.safe_load(EXAMPLE.read_text())
    robot = compare_dh_with_twin(data, tmp_path, seed=0)
    assert robot.source_kind == "dh" and robot.n == 6
    assert robot.joint_names[1] == "shoulder" and robot.body_names[1] == "upper_arm"
    # limits converted from degrees; effort in N m as written
    assert robot.lower[1] == pytest.approx(-120 * DEG) and robot.velocity_limit[0] == pytest.approx(150 * DEG)
    assert robot.effort_limit[2] == 70
    # the tool frame sits 95 mm along z of DH frame 6
    q = np.random.default_rng(1).uniform(-1, 1, 6)
    T6 = dh_chain(table_si(data), q, "standard")[-1]
    _, tcp = ident.frame_pose(robot, q, "gripper_tcp")
    np.testing.assert_allclose(tcp[0], (T6 @ [0, 0, 0.095, 1])[:3], atol=1e-13)
    # the same file through load_robot, the documented entry point
    assert np.array_equal(ident.load_robot(EXAMPLE).prior, load_dh(EXAMPLE).prior)


MODIFIED = {
    "format": "ident-dh/1",
    "name": "gantry_wrist",
    "convention": "modified",
    "units": {"angle": "rad", "length": "m"},
    "joints": [
        {"name": "swing", "type": "revolute", "a": 0.0, "alpha": 0.0, "d": 0.2, "theta": "q",
         "link": {"mass": 3.0, "com": [0.05, 0.0, -0.04], "inertia": [0.02, 0.001, 0.0, 0.03, 0.002, 0.025]}},
        {"name": "reach", "type": "prismatic", "a": 0.1, "alpha": -1.5707963267948966, "d": "q", "theta": 0.3, "offset": 0.15,
         "link": {"mass": 1.5, "com": [0.0, 0.01, -0.1], "inertia": [0.012, 0.0, 0.0005, 0.011, 0.0, 0.002]}},
        {"name": "twist", "type": "revolute", "a": 0.05, "alpha": 1.2, "d": 0.08, "theta": "q", "offset": 0.4,
         "link": {"mass": 0.7, "com": [0.02, -0.01, 0.03], "inertia": [0.003, 0.0002, 0.0, 0.0025, 0.0001, 0.0015]}},
    ],
}


def test_modified_dh_with_prismatic_joint_matches_urdf_twin(tmp_path):
    robot = compare_dh_with_twin(MODIFIED, tmp_path, seed=2)
    assert list(robot.joint_type) == [0, 1, 0]


def test_standard_dh_with_prismatic_joint_matches_urdf_twin(tmp_path):
    data = yaml.safe_load(yaml.safe_dump(MODIFIED))
    data["convention"] = "standard"
    compare_dh_with_twin(data, tmp_path, seed=3)


def test_dh_locked_joint_and_gravity(tmp_path):
    robot = parse_dh(MODIFIED, where="test", joints=["swing", "twist"], locked={"reach": 0.05})
    assert robot.joint_names == ["swing", "twist"] and robot.locked == {"reach": 0.05}
    full = parse_dh(MODIFIED, where="test")
    rng = np.random.default_rng(4)
    q2 = rng.uniform(-1, 1, (20, 2))
    q3 = np.insert(q2, 1, 0.05, axis=1)
    dq3 = np.insert(rng.uniform(-1, 1, (20, 2)), 1, 0.0, axis=1)
    # with the prismatic joint held, the remaining joints see the same torques
    tau3 = ident.inverse_dynamics(full, q3, dq3, np.zeros_like(q3))
    tau2 = ident.inverse_dynamics(robot, q2, dq3[:, [0, 2]], np.zeros_like(q2))
    np.testing.assert_allclose(tau2, tau3[:, [0, 2]], atol=1e-12)
    path = tmp_path / "g.yaml"
    data = dict(MODIFIED, gravity=[0.0, -9.81, 0.0])
    path.write_text(yaml.safe_dump(data))
    assert np.array_equal(ident.load_robot(path).gravity, [0.0, -9.81, 0.0])
    assert np.array_equal(ident.load_robot(path, gravity=[0, 0, -1.62]).gravity, [0, 0, -1.62])


# --- fixed-body merging ----------------------------------------------------------------------
def test_fixed_child_merged_with_parallel_axis(tmp_path):
    # A 2 kg cube (side 0.1 m, I_C = m s^2/6 about each axis: handbook) fixed 0.3 m along x of
    # a massless link must give the parallel-axis values m d^2 + m s^2/6 about y and z.
    text = """<robot name="m"><link name="b"/><link name="a"/><link name="cube">
      <inertial><mass value="2"/><inertia ixx="0.00333333333333333" ixy="0" ixz="0" iyy="0.00333333333333333" iyz="0" izz="0.00333333333333333"/></inertial></link>
      <joint name="j" type="revolute"><parent link="b"/><child link="a"/><axis xyz="0 0 1"/><limit lower="-1" upper="1"/></joint>
      <joint name="f" type="fixed"><parent link="a"/><child link="cube"/><origin xyz="0.3 0 0" rpy="0 0 0.7"/></joint></robot>"""
    robot = parse_urdf(text)
    assert robot.merged == [["a", "cube"]]
    I = 2 * 0.1**2 / 6
    np.testing.assert_allclose(robot.prior[0], [2, 0.6, 0, 0, I, 0, 0, I + 2 * 0.09, 0, I + 2 * 0.09], atol=1e-15)
    assert robot.frames["cube"].body == 0
    np.testing.assert_allclose(robot.frames["cube"].p, [0.3, 0, 0])


# --- bad descriptions ------------------------------------------------------------------------
GOOD_JOINT = '<joint name="j1" type="revolute"><parent link="base"/><child link="l1"/><axis xyz="0 0 1"/><limit lower="-1" upper="1"/></joint>'


def urdf(body: str) -> str:
    return f'<robot name="t"><link name="base"/><link name="l1"><inertial><mass value="1"/><inertia ixx="0.01" iyy="0.01" izz="0.01"/></inertial></link>{body}</robot>'


BAD_URDF = {
    "malformed": ("<robot name='t'><link name='a'></robot>", r"malformed XML"),
    "missing_parent": (urdf('<joint name="j1" type="revolute"><parent link="nowhere"/><child link="l1"/><limit lower="-1" upper="1"/></joint>'),
                       r"joint 'j1' names parent link 'nowhere', which is not defined"),
    "cycle": ('<robot name="t"><link name="a"/><link name="b"/>'
              '<joint name="ab" type="fixed"><parent link="a"/><child link="b"/></joint>'
              '<joint name="ba" type="fixed"><parent link="b"/><child link="a"/></joint></robot>', r"cycle"),
    "detached_cycle": (urdf(GOOD_JOINT + '<link name="x"/><link name="y"/>'
                            '<joint name="xy" type="fixed"><parent link="x"/><child link="y"/></joint>'
                            '<joint name="yx" type="fixed"><parent link="y"/><child link="x"/></joint>'),
                       r"not connected to the base 'base': x, y"),
    "unknown_type": (urdf('<joint name="j1" type="screw"><parent link="base"/><child link="l1"/></joint>'), r"joint 'j1' has unknown type 'screw'"),
    "negative_mass": (urdf(GOOD_JOINT).replace('<mass value="1"/>', '<mass value="-1"/>'), r"link 'l1': negative mass"),
    "not_psd": (urdf(GOOD_JOINT).replace('ixx="0.01"', 'ixx="-0.01"'), r"link 'l1': inertia is not positive semidefinite"),
    "triangle": (urdf(GOOD_JOINT).replace('izz="0.01"', 'izz="0.05"'), r"link 'l1': principal moments .* triangle inequality"),
    "floating": (urdf('<joint name="j1" type="floating"><parent link="base"/><child link="l1"/></joint>'), r"joint 'j1' is a floating joint"),
    "planar": (urdf('<joint name="j1" type="planar"><parent link="base"/><child link="l1"/></joint>'), r"joint 'j1' is a planar joint"),
    "mimic": (urdf(GOOD_JOINT + '<link name="l2"/><joint name="j2" type="revolute"><parent link="l1"/><child link="l2"/>'
                   '<axis xyz="0 0 1"/><limit lower="-1" upper="1"/><mimic joint="j1"/></joint>'), r"joint 'j2' is a mimic joint"),
    "entity_bomb": ('<?xml version="1.0"?><!DOCTYPE lolz [<!ENTITY lol "lol"><!ENTITY lol2 "&lol;&lol;&lol;&lol;&lol;&lol;&lol;&lol;">'
                    '<!ENTITY lol3 "&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;&lol2;">]><robot name="&lol3;"><link name="base"/></robot>',
                    r"refused unsafe XML"),
    "external_entity": ('<?xml version="1.0"?><!DOCTYPE r [<!ENTITY leak SYSTEM "file:///etc/passwd">]>'
                        '<robot name="&leak;"><link name="base"/></robot>', r"refused unsafe XML"),
    "not_a_robot": ('<sdf version="1.6"><model name="m"/></sdf>', r"root element is <sdf>, expected <robot>"),
    "lower_above_upper": (urdf(GOOD_JOINT.replace('lower="-1" upper="1"', 'lower="1" upper="-1"')), r"joint 'j1': lower limit 1 is above upper limit -1"),
    "nan_origin": (urdf(GOOD_JOINT.replace('<axis', '<origin xyz="0 nan 0"/><axis')), r"joint 'j1' <origin xyz>"),
}


def test_lock_outside_the_limits_is_refused(tmp_path, capsys):
    # 30 for a joint limited to +-1 rad: almost surely degrees given for radians
    text = urdf(GOOD_JOINT + '<link name="l2"/><joint name="j2" type="revolute"><parent link="l1"/><child link="l2"/>'
                '<axis xyz="0 1 0"/><limit lower="-1" upper="1"/></joint>')
    with pytest.raises(ident.ModelError, match=r"^bad.urdf: lock position 30 rad of joint 'j2' is outside its limits \[-1, 1\] rad$"):
        parse_urdf(text, where="bad.urdf", locked={"j2": 30})
    assert parse_urdf(text, where="ok.urdf", locked={"j2": 1.0}).locked == {"j2": 1.0}  # on the limit is fine
    path = tmp_path / "arm.urdf"
    path.write_text(text)
    assert cli_main(["model", str(path), "--lock", "j2=30"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "lock position 30 rad of joint 'j2' is outside its limits" in err


@pytest.mark.parametrize("case", list(BAD_URDF))
def test_bad_urdf_is_refused_naming_the_element(case):
    text, pattern = BAD_URDF[case]
    with pytest.raises(ident.ModelError, match=pattern) as info:
        parse_urdf(text, where="bad.urdf")
    assert str(info.value).startswith("bad.urdf: ") and "\n" not in str(info.value)


def test_bad_description_through_cli_is_one_line_exit_2(tmp_path, capsys):
    path = tmp_path / "bomb.urdf"
    path.write_text(BAD_URDF["entity_bomb"][0])
    assert cli_main(["model", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert "refused unsafe XML" in err and "bomb.urdf" in err and len(err.splitlines()) == 1
    bad = tmp_path / "bad.yaml"
    bad.write_text(yaml.safe_dump(dict(MODIFIED, units={"angle": "degrees", "length": "m"})))
    assert cli_main(["model", str(bad)]) == 2
    assert "units.angle: expected one of deg, rad, got 'degrees'" in capsys.readouterr().err


def edit(path_keys, value=None, delete=False):
    data = yaml.safe_load(yaml.safe_dump(MODIFIED))
    obj = data
    for k in path_keys[:-1]:
        obj = obj[k]
    if delete:
        del obj[path_keys[-1]]
    else:
        obj[path_keys[-1]] = value
    return data


BAD_DH = {
    "unknown_top_key": (edit(["colour"], "red"), r"top level: unknown key\(s\) colour"),
    "missing_units": (edit(["units"], delete=True), r"top level: missing key 'units'"),
    "wrong_format": (edit(["format"], "dh/0"), r"format: expected 'ident-dh/1'"),
    "bad_convention": (edit(["convention"], "craig"), r"convention: expected 'standard' or 'modified'"),
    "length_unit": (edit(["units", "length"], "inch"), r"units.length: expected one of m, mm, got 'inch'"),
    "angle_in_degrees_declared_rad": (edit(["joints", 2, "alpha"], 90), r"joint 'twist'.alpha: 90 rad is more than a full turn: is units.angle right\?"),
    "length_in_mm_declared_m": (edit(["joints", 0, "d"], 200), r"joint 'swing'.d: 200 m is 200 m, implausible .* units.length"),
    "metres_declared_mm": (edit(["units", "length"], "mm"), r"units.length: every length in the table is below 5 mm \(largest 0.2 mm\): are they in metres\?"),
    "radians_declared_deg": (edit(["units", "angle"], "deg"), r"joint 'reach'.alpha: -1.5707963267948966 deg looks like radians"),
    "unknown_joint_key": (edit(["joints", 0, "gear"], 100), r"joint 'swing': unknown key\(s\) gear"),
    "missing_dh_number": (edit(["joints", 1, "a"], delete=True), r"joint 'reach': missing key 'a'"),
    "variable_not_marked": (edit(["joints", 0, "theta"], 0.0), r"joint 'swing'.theta: a revolute joint's variable is theta"),
    "wrong_variable": (edit(["joints", 1, "theta"], "q"), r"joint 'reach'.theta: 'q' marks the variable, which for a prismatic joint is d, not theta"),
    "bad_type": (edit(["joints", 1, "type"], "telescopic"), r"joint 'reach'.type: expected 'revolute' or 'prismatic'"),
    "negative_mass": (edit(["joints", 2, "link", "mass"], -0.7), r"joint 'twist'.link.mass: negative mass -0.7 kg"),
    "not_psd": (edit(["joints", 0, "link", "inertia"], [0.02, 0.0, 0.0, -0.03, 0.0, 0.025]), r"joint 'swing'.link.inertia: inertia about the COM is not positive semidefinite"),
    "triangle": (edit(["joints", 0, "link", "inertia"], [0.01, 0.0, 0.0, 0.01, 0.0, 0.05]), r"joint 'swing'.link.inertia: principal moments .* triangle inequality"),
    "partial_prior": (edit(["joints", 0, "link"], {"mass": 2.0}), r"joint 'swing'.link: missing key 'com'"),
    "lower_above_upper": (edit(["joints", 0, "limits"], {"lower": 1.0, "upper": -1.0}), r"joint 'swing'.limits: lower limit 1.0 is above upper limit -1.0"),
    "zero_velocity": (edit(["joints", 0, "limits"], {"velocity": 0}), r"joint 'swing'.limits.velocity: must be positive"),
    "nan": (edit(["joints", 0, "a"], float("nan")), r"joint 'swing'.a: expected a finite number"),
    "text_number": (edit(["joints", 0, "a"], "0.1m"), r"joint 'swing'.a: expected a number, got '0.1m'"),
    "duplicate_joint": (edit(["joints", 2, "name"], "swing"), r"joint name 'swing' is used twice"),
    "duplicate_link": (edit(["joints", 1, "link", "name"], "link1"), r"link or frame name 'link1' is used twice"),
    "tool_key": (edit(["tool"], {"name": "tcp", "xyz": [0, 0, 0.1], "mass": 1}), r"tool: unknown key\(s\) mass"),
    "gravity_size": (edit(["gravity"], [0, -9.81]), r"gravity: expected a list of 3 numbers"),
}


@pytest.mark.parametrize("case", list(BAD_DH))
def test_bad_dh_is_refused_naming_the_key(case):
    data, pattern = BAD_DH[case]
    with pytest.raises(ident.ModelError, match=pattern) as info:
        parse_dh(data, where="arm.yaml")
    assert str(info.value).startswith("arm.yaml: ") and "\n" not in str(info.value)


def test_malformed_dh_yaml_names_file_and_line(tmp_path):
    path = tmp_path / "broken.yaml"
    path.write_text("format: ident-dh/1\nname: x\njoints: [\n  {name: a\n")
    with pytest.raises(ident.ModelError, match=r"broken.yaml: malformed YAML at line \d+"):
        load_dh(path)
    path.write_text("- just\n- a list\n")
    with pytest.raises(ident.ModelError, match=r"top level: expected a mapping, got list"):
        load_dh(path)


# --- ident model ---------------------------------------------------------------------------------
def test_cli_model_table_of_a_branched_arm_with_a_prismatic_finger(capsys):
    # baxter from example-robot-data: head and left arm are separate branches of the base, the
    # gripper finger is prismatic; limits as written in its URDF (read back by pin in
    # test_dynamics_reference.test_limits_match_pin).
    from conftest import erd_path

    path = str(erd_path("baxter_description/urdf/baxter.urdf"))
    args = ["model", path, "--joints", "head_pan,left_s0,left_s1,l_gripper_l_finger_joint", "--lock", "l_gripper_r_finger_joint=-0.01"]
    assert cli_main(args) == 0
    lines = capsys.readouterr().out.splitlines()
    rows = {line.split()[1]: line.split() for line in lines if line[:1].isdigit() and len(line.split()) == 11}
    assert rows["left_s1"][2:] == ["revolute", "0", "0", "1", "left_upper_shoulder", "-2.147", "1.047", "1.5", "50"]
    assert rows["l_gripper_l_finger_joint"][2:] == ["prismatic", "0", "1", "0", "left_lower_shoulder", "0", "0.02083", "5", "20"]
    assert rows["left_s0"][6] == "base" and rows["head_pan"][6] == "base"  # two branches of the base
    assert any("l_gripper_r_finger_joint=-0.01" in line for line in lines if line.startswith("locked joints"))
    assert lines[-1] == "parameters: 40 inertial (10 per body) + 12 joint terms [fv (viscous friction), fc (Coulomb friction), ia (armature (reflected rotor inertia))] = 52"
    assert cli_main(args + ["--format", "json", "--terms", "fo"]) == 0
    info = json.loads(capsys.readouterr().out)
    finger = info["joints"][3]
    assert finger["type"] == "prismatic" and finger["units"] == "m, m/s, N" and finger["upper"] == pytest.approx(0.020833)
    assert info["parameters"] == {"inertial": 40, "joint_terms": 4, "total": 44}
    assert "l_gripper_r_finger" in info["bodies"][2]["merged_links"]
