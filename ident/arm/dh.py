"""Read a Denavit-Hartenberg description (our own YAML layout, ``ident-dh/1``) into a :class:`Robot`.

Layout (every key is checked; unknown keys are refused)::

    format: ident-dh/1
    name: my_arm
    convention: standard          # or: modified
    units: {angle: deg, length: mm}   # angle: deg|rad, length: m|mm (both required)
    gravity: [0, 0, -9.81]        # optional, m/s^2 in the base frame (always SI)
    base: base_link               # optional name of the fixed base link
    joints:
      - name: j1
        type: revolute            # or: prismatic
        a: 0                      # length unit
        alpha: -90                # angle unit
        d: 330                    # length unit; write "q" here for a prismatic joint
        theta: q                  # angle unit; "q" marks the joint variable (revolute)
        offset: 0                 # value of the joint variable's DH entry at q = 0 (optional)
        limits: {lower: -170, upper: 170, velocity: 180, effort: 120}   # optional, see below
        link:                     # optional prior of the link the joint moves
          name: turret            # optional (default link<i>)
          mass: 3.2               # kg
          com: [0, -20, 5]        # length unit, in DH frame i
          inertia: [xx, xy, xz, yy, yz, zz]   # kg * length unit^2, about the COM, DH frame i axes
    tool: {name: flange, xyz: [0, 0, 80], rpy: [0, 0, 0]}   # optional, placed in DH frame n:
                                  # xyz in the length unit, URDF-style roll-pitch-yaw in the angle unit

Limits: lower/upper in the angle (revolute) or length (prismatic) unit, velocity in that unit per
second, effort in N m or N. Each is optional (absent = unlimited).

Conventions. ``standard``: A_i = Rz(theta_i) Tz(d_i) Tx(a_i) Rx(alpha_i), joint i moves about
z_{i-1}. ``modified``: A_i = Rx(alpha_{i-1}) Tx(a_{i-1}) Rz(theta_i) Tz(d_i) with alpha_{i-1},
a_{i-1} written in row i, joint i moves about z_i. The variable entry is q_i + offset_i.

Frames. ident's body frame is the joint frame after the joint's motion, with the joint axis as
its z axis (see :mod:`ident.arm.model`). For the modified convention that is DH frame i itself. For
the standard convention the body frame of link i is B_i = F_{i-1} Rz(theta_i) Tz(d_i), i.e. DH
frame i-1 carried along by joint i; DH frame i sits on the same body at F_i = B_i Tx(a_i)
Rx(alpha_i). The link priors are written in DH frame i (as data sheets give them) and converted
to the body frame with :func:`ident.arm.spatial.transform_params`. In both conventions
``robot.frames`` holds every DH frame as ``dh0`` (the base) ... ``dh<n>``, plus the tool frame,
so points can be placed in the frames the table defines.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import ModelError
from ..fileio import read_yaml
from ..intake import number, shown
from .model import Robot
from .spatial import rpy_to_matrix, to_vector, transform_params
from .tree import JointSpec, LinkSpec, build_robot

FORMAT = "ident-dh/1"
ANGLE_UNITS = {"deg": np.pi / 180.0, "rad": 1.0}
LENGTH_UNITS = {"m": 1.0, "mm": 1e-3}
_TOP_KEYS = {"format", "name", "convention", "units", "gravity", "base", "joints", "tool"}
_JOINT_KEYS = {"name", "type", "a", "alpha", "d", "theta", "offset", "limits", "link"}
_LIMIT_KEYS = {"lower", "upper", "velocity", "effort"}
_LINK_KEYS = {"name", "mass", "com", "inertia"}
_TOOL_KEYS = {"name", "xyz", "rpy"}
#: Plausibility bounds that catch a wrong unit declaration (common practice for arm-sized robots).
_MAX_LENGTH_M = 20.0
_MAX_ANGLE_RAD = 2.0 * np.pi + 1e-9


def _rot_x(t: float) -> np.ndarray:
    c, s = np.cos(t), np.sin(t)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def _rot_z(t: float) -> np.ndarray:
    c, s = np.cos(t), np.sin(t)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def _compose(*transforms):
    """Product of rigid transforms (R, p), left to right."""
    R, p = np.eye(3), np.zeros(3)
    for Ri, pi in transforms:
        p = p + R @ pi
        R = R @ Ri
    return R, p


def _tx(a):
    return np.eye(3), np.array([a, 0.0, 0.0])


def _tz(d):
    return np.eye(3), np.array([0.0, 0.0, d])


def _rx(t):
    return _rot_x(t), np.zeros(3)


def _rz(t):
    return _rot_z(t), np.zeros(3)


class _Reader:
    """Checks values and keys; every message names the file and the place in it."""

    def __init__(self, where: str):
        self.where = where

    def fail(self, place: str, msg: str):
        raise ModelError(f"{self.where}: {place}: {msg}")

    def mapping(self, obj, place: str, allowed: set, required=()) -> dict:
        if not isinstance(obj, dict):
            self.fail(place, f"expected a mapping, got {type(obj).__name__}")
        unknown = sorted(str(k) for k in obj if k not in allowed)
        if unknown:
            self.fail(place, f"unknown key(s) {', '.join(unknown)} (allowed: {', '.join(sorted(allowed))})")
        for key in required:
            if key not in obj:
                self.fail(place, f"missing key '{key}'")
        return obj

    def number(self, obj, place: str, quantity: str = "parameter") -> float:
        return number(obj, f"{self.where}: {place}", quantity, ModelError)

    def vector(self, obj, place: str, size: int, quantity: str = "parameter") -> np.ndarray:
        if not isinstance(obj, (list, tuple)) or len(obj) != size:
            self.fail(place, f"expected a list of {size} numbers, got {shown(obj)}")
        return np.array([self.number(v, f"{place}[{i}]", quantity) for i, v in enumerate(obj)])

    def name(self, obj, place: str) -> str:
        if not isinstance(obj, str) or not obj.strip() or obj != obj.strip():
            self.fail(place, f"expected a non-empty name without surrounding spaces, got {shown(obj)}")
        return obj


def parse_dh(data, where: str = "DH description", joints=None, locked=None) -> Robot:
    """Build a :class:`Robot` from an already-parsed ``ident-dh/1`` mapping.

    Parameters
    ----------
    data : the mapping (as ``yaml.safe_load`` returns it; layout in the module docstring).
    where : name of the source in error messages (a file path).
    joints, locked : as for :func:`load_dh`.
    """
    rd = _Reader(where)
    top = rd.mapping(data, "top level", _TOP_KEYS, ("format", "name", "convention", "units", "joints"))
    if top["format"] != FORMAT:
        rd.fail("format", f"expected '{FORMAT}', got {shown(top['format'])}")
    name = rd.name(top["name"], "name")
    convention = top["convention"]
    if convention not in ("standard", "modified"):
        rd.fail("convention", f"expected 'standard' or 'modified', got {shown(convention)}")
    units = rd.mapping(top["units"], "units", {"angle", "length"}, ("angle", "length"))
    if units["angle"] not in ANGLE_UNITS:
        rd.fail("units.angle", f"expected one of {', '.join(ANGLE_UNITS)}, got {shown(units['angle'])}")
    if units["length"] not in LENGTH_UNITS:
        rd.fail("units.length", f"expected one of {', '.join(LENGTH_UNITS)}, got {shown(units['length'])}")
    ang, lng = ANGLE_UNITS[units["angle"]], LENGTH_UNITS[units["length"]]
    gravity = None
    if "gravity" in top:
        gravity = rd.vector(top["gravity"], "gravity", 3, "gravity")
    base = rd.name(top.get("base", "base"), "base")
    rows = top["joints"]
    if not isinstance(rows, list) or not rows:
        rd.fail("joints", "expected a non-empty list of joints")

    def length(val, place):
        x = rd.number(val, place) * lng
        if abs(x) > _MAX_LENGTH_M:
            rd.fail(place, f"{val} {units['length']} is {x:g} m, implausible for an arm: is units.length right?")
        return x

    def angle(val, place):
        x = rd.number(val, place) * ang
        if abs(x) > _MAX_ANGLE_RAD:
            rd.fail(place, f"{val} {units['angle']} is more than a full turn: is units.angle right?")
        return x

    links = [LinkSpec(base), LinkSpec("dh0")]
    specs = [JointSpec("dh0_fixed", "fixed", base, "dh0", np.eye(3), np.zeros(3), np.array([0.0, 0.0, 1.0]))]
    prev_frame = "dh0"
    largest_length = 0.0  # in the file's unit, to catch metres declared as millimetres
    used = {base, "dh0"}
    for i, row in enumerate(rows):
        place = f"joints[{i}]"
        if isinstance(row, dict) and isinstance(row.get("name"), str) and row["name"].strip():
            place = f"joint '{row['name']}'"  # name the joint in messages as soon as we can
        row = rd.mapping(row, place, _JOINT_KEYS, ("name", "type", "a", "alpha", "d", "theta"))
        jname = rd.name(row["name"], place + ".name")
        jtype = row["type"]
        if jtype not in ("revolute", "prismatic"):
            rd.fail(place + ".type", f"expected 'revolute' or 'prismatic', got {shown(jtype)}")
        var_key = "theta" if jtype == "revolute" else "d"
        const_key = "d" if jtype == "revolute" else "theta"
        if row[var_key] != "q":
            rd.fail(f"{place}.{var_key}", f"a {jtype} joint's variable is {var_key}: write {var_key}: q (and its zero position as 'offset')")
        if row[const_key] == "q":
            rd.fail(f"{place}.{const_key}", f"'q' marks the variable, which for a {jtype} joint is {var_key}, not {const_key}")
        a = length(row["a"], place + ".a")
        alpha = angle(row["alpha"], place + ".alpha")
        if units["angle"] == "deg" and min(abs(abs(alpha / ang) - np.pi / 2), abs(abs(alpha / ang) - np.pi)) < 1e-3:
            rd.fail(place + ".alpha", f"{row['alpha']} deg looks like radians (pi/2 or pi): is units.angle right?")
        if jtype == "revolute":
            d = length(row["d"], place + ".d")
            offset = angle(row.get("offset", 0.0), place + ".offset")
            theta = 0.0
            unit = ang
        else:
            theta = angle(row["theta"], place + ".theta")
            offset = length(row.get("offset", 0.0), place + ".offset")
            d = 0.0
            unit = lng
        largest_length = max(largest_length, abs(a), abs(d), abs(offset) if jtype == "prismatic" else 0.0)

        lim = rd.mapping(row.get("limits", {}), place + ".limits", _LIMIT_KEYS)
        lower = rd.number(lim["lower"], place + ".limits.lower", "position") * unit if "lower" in lim else -np.inf
        upper = rd.number(lim["upper"], place + ".limits.upper", "position") * unit if "upper" in lim else np.inf
        if lower > upper:
            rd.fail(place + ".limits", f"lower limit {lim['lower']} is above upper limit {lim['upper']}")
        velocity = rd.number(lim["velocity"], place + ".limits.velocity", "velocity") * unit if "velocity" in lim else np.inf
        effort = rd.number(lim["effort"], place + ".limits.effort", "torque") if "effort" in lim else np.inf
        for key, val in (("velocity", velocity), ("effort", effort)):
            if not val > 0:
                rd.fail(f"{place}.limits.{key}", f"must be positive, got {lim[key]}")

        link = rd.mapping(row.get("link", {}), place + ".link", _LINK_KEYS)
        lname = rd.name(link.get("name", f"link{i + 1}"), place + ".link.name")
        for nm in (lname, f"dh{i + 1}"):
            if nm in used:
                rd.fail(place, f"link or frame name '{nm}' is used twice")
            used.add(nm)
        pi_dh = _link_prior(rd, link, place + ".link", lng)

        # The joint's fixed part (placed in the previous DH frame) and the body -> DH frame i map.
        if convention == "standard":
            fixed = _compose(_tz(d), _rz(offset)) if jtype == "revolute" else _compose(_rz(theta), _tz(offset))
            to_dh = _compose(_tx(a), _rx(alpha))
        else:
            pre = _compose(_rx(alpha), _tx(a))
            fixed = _compose(pre, _tz(d), _rz(offset)) if jtype == "revolute" else _compose(pre, _rz(theta), _tz(offset))
            to_dh = (np.eye(3), np.zeros(3))
        # prior in DH frame i -> body frame: DH frame i has pose to_dh in the body frame
        pi_body = transform_params(pi_dh, to_dh[0], to_dh[1])
        links.append(LinkSpec(lname, pi_body))
        links.append(LinkSpec(f"dh{i + 1}"))
        specs.append(
            JointSpec(jname, jtype, prev_frame, lname, fixed[0], fixed[1], np.array([0.0, 0.0, 1.0]),
                      lower=lower, upper=upper, velocity=velocity, effort=effort)
        )
        specs.append(JointSpec(f"dh{i + 1}_fixed", "fixed", lname, f"dh{i + 1}", to_dh[0], to_dh[1], np.array([0.0, 0.0, 1.0])))
        prev_frame = f"dh{i + 1}"

    if units["length"] == "mm" and 0.0 < largest_length < 5e-3:
        rd.fail("units.length", f"every length in the table is below 5 mm (largest {largest_length * 1e3:g} mm): are they in metres?")
    if "tool" in top:
        tool = rd.mapping(top["tool"], "tool", _TOOL_KEYS, ("name",))
        tname = rd.name(tool["name"], "tool.name")
        if tname in used:
            rd.fail("tool.name", f"name '{tname}' is already used by a link or frame")
        xyz = rd.vector(tool.get("xyz", [0, 0, 0]), "tool.xyz", 3) * lng
        rpy = rd.vector(tool.get("rpy", [0, 0, 0]), "tool.rpy", 3) * ang
        links.append(LinkSpec(tname))
        specs.append(JointSpec(f"{tname}_fixed", "fixed", prev_frame, tname, rpy_to_matrix(rpy), xyz, np.array([0.0, 0.0, 1.0])))

    names = [s.name for s in specs]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        rd.fail("joints", f"joint name '{dup[0]}' is used twice (names ending in _fixed are reserved for frames)")
    return build_robot(name, links, specs, selected=joints, locked=locked, gravity=gravity, source=where, source_kind="dh", where=where)


def _link_prior(rd: _Reader, link: dict, place: str, lng: float) -> np.ndarray:
    """The link's 10-vector in DH frame i from mass, COM and inertia about the COM (zeros when absent)."""
    if not any(k in link for k in ("mass", "com", "inertia")):
        return np.zeros(10)
    for key in ("mass", "com", "inertia"):
        if key not in link:
            rd.fail(place, f"missing key '{key}' (give mass, com and inertia together)")
    mass = rd.number(link["mass"], place + ".mass", "mass")
    if mass < 0:
        rd.fail(place + ".mass", f"negative mass {mass:g} kg")
    com = rd.vector(link["com"], place + ".com", 3) * lng
    xx, xy, xz, yy, yz, zz = rd.vector(link["inertia"], place + ".inertia", 6, "inertia") * lng**2
    I_c = np.array([[xx, xy, xz], [xy, yy, yz], [xz, yz, zz]])
    ev = np.linalg.eigvalsh(I_c)
    scale = max(abs(ev).max(), 1e-300)
    if np.any(ev != 0):
        # a point mass (zero inertia) is a valid limit case, as in URDF
        if ev.min() < -1e-12 * scale:
            rd.fail(place + ".inertia", f"inertia about the COM is not positive semidefinite (principal moments {np.round(ev, 12).tolist()} kg m^2)")
        if np.any(2 * ev > ev.sum() * (1 + 1e-9)):
            rd.fail(place + ".inertia", f"principal moments {np.round(ev, 12).tolist()} kg m^2 violate the triangle inequality")
    return to_vector(mass, com, I_c)


def load_dh(path, joints=None, locked=None) -> Robot:
    """Load a DH description file (YAML, layout ``ident-dh/1``; see the module docstring).

    Parameters
    ----------
    path : the YAML file.
    joints : names of the joints to identify (default: all); the others are locked.
    locked : {joint name: position (rad or m, SI)} for locked joints (default 0).

    Returns
    -------
    Robot with ``source_kind == "dh"``; ``robot.frames`` holds ``dh0`` ... ``dh<n>`` and the tool.
    """
    p = Path(path)
    data = read_yaml(p, "DH description", ModelError)
    return parse_dh(data, where=str(p), joints=joints, locked=locked)
