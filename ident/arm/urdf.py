"""Read a URDF robot description (safely) into a :class:`ident.arm.model.Robot`.

XML is parsed with ``defusedxml``: no DTDs, no entity expansion and no external references, so
an untrusted file cannot expand into gigabytes or read local files.
"""

from __future__ import annotations

from pathlib import Path
from xml.etree.ElementTree import ParseError

import numpy as np
from defusedxml import DefusedXmlException
from defusedxml import ElementTree as SafeET

from ..errors import ModelError
from ..intake import text_number
from .model import Robot
from .spatial import rpy_to_matrix, sym_to_matrix, to_vector
from .tree import JointSpec, LinkSpec, build_robot


def _floats(text, count, what, quantity=None) -> np.ndarray:
    items = (text or "").split()
    if len(items) != count:
        raise ModelError(f"{what}: '{text}' is not {count} numbers")
    return np.array([text_number(t, what, quantity, ModelError) for t in items])


def _attr_float(elem, key, what, default=None, quantity=None) -> float:
    val = elem.get(key)
    if val is None:
        if default is None:
            raise ModelError(f"{what}: attribute '{key}' is missing")
        return default
    # +-inf stays allowed for the limits that mean "none given" (velocity, effort)
    return text_number(val, f"{what}: attribute {key}", quantity, ModelError, allow_inf=quantity in ("velocity", "torque"))


def _origin(elem, what):
    o = elem.find("origin")
    if o is None:
        return np.eye(3), np.zeros(3)
    xyz = _floats(o.get("xyz", "0 0 0"), 3, f"{what} <origin xyz>", "length")
    rpy = _floats(o.get("rpy", "0 0 0"), 3, f"{what} <origin rpy>", "angle")
    return rpy_to_matrix(rpy), xyz


def _link_params(link, where) -> np.ndarray:
    name = link.get("name")
    what = f"{where}: link '{name}'"
    inertial = link.find("inertial")
    if inertial is None:
        return np.zeros(10)
    R, com = _origin(inertial, what + " inertial")
    mass_el = inertial.find("mass")
    mass = 0.0 if mass_el is None else _attr_float(mass_el, "value", what + " <mass>", quantity="mass")
    if mass < 0:
        raise ModelError(f"{what}: negative mass {mass:g} kg")
    in_el = inertial.find("inertia")
    keys = ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")
    vals = np.zeros(6) if in_el is None else np.array([_attr_float(in_el, k, what + " <inertia>", 0.0, "inertia") for k in keys])
    I_urdf = sym_to_matrix(vals)
    I_c = R @ I_urdf @ R.T
    if mass > 0 or np.any(vals != 0):
        ev = np.linalg.eigvalsh(I_c)
        if ev.min() < -1e-12 * max(1.0, abs(ev).max()):
            raise ModelError(f"{what}: inertia is not positive semidefinite (principal moments {np.round(ev, 12).tolist()})")
        if np.any(2 * ev > ev.sum() * (1 + 1e-6) + 1e-12):
            raise ModelError(f"{what}: principal moments {np.round(ev, 12).tolist()} violate the triangle inequality")
    return to_vector(mass, com, I_c)


def parse_urdf(text: str, where: str = "URDF", joints=None, locked=None) -> Robot:
    """Parse URDF text; see :func:`load_urdf`. `where` names the source in error messages."""
    name, links, specs = urdf_specs(text, where)
    return build_robot(name, links, specs, selected=joints, locked=locked, source=where, source_kind="urdf", where=where)


def urdf_specs(text: str, where: str = "URDF"):
    """The links and joints of URDF text as written, before any locking or merging:
    (robot name, [LinkSpec] in file order, [JointSpec] in file order)."""
    try:
        root = SafeET.fromstring(text)
    except DefusedXmlException as exc:
        raise ModelError(f"{where}: refused unsafe XML ({type(exc).__name__}: DTDs and entities are not allowed)") from None
    except ParseError as exc:
        raise ModelError(f"{where}: malformed XML ({exc})") from None
    if root.tag != "robot":
        raise ModelError(f"{where}: root element is <{root.tag}>, expected <robot>")
    name = root.get("name") or Path(where).stem
    links = []
    for link in root.findall("link"):
        lname = link.get("name")
        if not lname:
            raise ModelError(f"{where}: a <link> has no name")
        links.append(LinkSpec(lname, _link_params(link, where)))
    specs = []
    for j in root.findall("joint"):
        jname = j.get("name")
        if not jname:
            raise ModelError(f"{where}: a <joint> has no name")
        what = f"{where}: joint '{jname}'"
        jtype = j.get("type")
        if jtype is None:
            raise ModelError(f"{what}: has no type")
        par, chi = j.find("parent"), j.find("child")
        if par is None or par.get("link") is None:
            raise ModelError(f"{what}: has no <parent link=...>")
        if chi is None or chi.get("link") is None:
            raise ModelError(f"{what}: has no <child link=...>")
        R, p = _origin(j, what)
        ax_el = j.find("axis")
        axis = np.array([1.0, 0.0, 0.0]) if ax_el is None else _floats(ax_el.get("xyz", "1 0 0"), 3, f"{what} <axis>", "scale")
        norm = np.linalg.norm(axis)
        if jtype in ("revolute", "continuous", "prismatic") and norm < 1e-12:
            raise ModelError(f"{what}: axis is zero")
        axis = axis / norm if norm > 0 else axis
        spec = JointSpec(jname, jtype, par.get("link"), chi.get("link"), R, p, axis, mimic=j.find("mimic") is not None)
        lim = j.find("limit")
        if jtype in ("revolute", "prismatic"):
            if lim is None:
                raise ModelError(f"{what}: {jtype} joint has no <limit>")
            spec.lower = _attr_float(lim, "lower", what + " <limit>", 0.0, "position")
            spec.upper = _attr_float(lim, "upper", what + " <limit>", 0.0, "position")
            if spec.lower > spec.upper:
                raise ModelError(f"{what}: lower limit {spec.lower:g} is above upper limit {spec.upper:g}")
        if lim is not None and jtype in ("revolute", "prismatic", "continuous"):
            spec.velocity = _attr_float(lim, "velocity", what + " <limit>", np.inf, "velocity")
            spec.effort = _attr_float(lim, "effort", what + " <limit>", np.inf, "torque")
            for key in ("velocity", "effort"):
                if getattr(spec, key) <= 0:
                    setattr(spec, key, np.inf)  # URDF files often carry 0 for "not given"
        specs.append(spec)
    return name, links, specs


def load_urdf(path, joints=None, locked=None) -> Robot:
    """Load a URDF file.

    Parameters
    ----------
    path : URDF file.
    joints : joint names to identify (default: every movable joint; a mimic joint must be locked).
    locked : {joint: position} for joints not identified (rad or m, default 0); they are merged.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelError(f"{p}: cannot read ({exc})") from None
    robot = parse_urdf(text, where=str(p), joints=joints, locked=locked)
    return robot
