"""MJCF export: a MuJoCo model of the arm with the identified inertials and joint terms.

The kinematic tree is the URDF's (every link a ``<body>``, every movable joint a ``hinge`` or
``slide`` joint, fixed joints none), so joints locked for identification stay movable. Each link's
inertial is what :mod:`ident.handover.inertials` hands over (merged bodies split back, the
description's values where the data see nothing, `digits` significant digits). Per identified
joint: ``armature`` = ia (reflected rotor inertia), ``damping`` = fv (viscous) and
``frictionloss`` = fc (MuJoCo's dry friction, a soft constraint that saturates at fc when moving;
near zero speed it is not sign(q')). The constant offset fo has no MJCF field and is left out
(noted in a comment). Gravity is the model's (the parameter file's context). No geometry is
written: the file is for dynamics, not for collision or display. The root link is the fixed
base and becomes MuJoCo's world body.
"""

from __future__ import annotations

from pathlib import Path
from xml.sax.saxutils import quoteattr

import numpy as np

from ..arm.model import Robot
from ..arm.parameters import ParameterSet
from ..arm.spatial import from_vector
from ..arm.urdf import urdf_specs
from ..errors import IdentError, ModelError
from ..fileio import write_text
from .export import description_text
from .inertials import DIGITS, hand_over, link_vector, round_sig


def _quat(R: np.ndarray) -> np.ndarray:
    """Unit quaternion (w, x, y, z) of rotation matrix `R` (3, 3)."""
    w = np.sqrt(max(0.0, 1.0 + R[0, 0] + R[1, 1] + R[2, 2])) / 2.0
    x = np.copysign(np.sqrt(max(0.0, 1.0 + R[0, 0] - R[1, 1] - R[2, 2])) / 2.0, R[2, 1] - R[1, 2])
    y = np.copysign(np.sqrt(max(0.0, 1.0 - R[0, 0] + R[1, 1] - R[2, 2])) / 2.0, R[0, 2] - R[2, 0])
    z = np.copysign(np.sqrt(max(0.0, 1.0 - R[0, 0] - R[1, 1] + R[2, 2])) / 2.0, R[1, 0] - R[0, 1])
    q = np.array([w, x, y, z])
    return q / np.linalg.norm(q)


def mjcf_text(urdf_text: str, robot: Robot, ps: ParameterSet, where: str = "URDF", digits: int = DIGITS) -> str:
    """MJCF text of the arm described by `urdf_text` with the parameters `ps` identified for `robot`.

    Raises :class:`IdentError` for parameters with no physical form or negative joint terms, and
    :class:`ModelError` when the URDF and the model disagree.
    """
    name, links, joints = urdf_specs(urdf_text, where)
    ho = hand_over(robot, ps, links, joints, digits)
    ps = ps.check_robot(robot, where="parameter set")
    own = {lk.name: np.asarray(lk.params, float) for lk in links}
    children: dict[str, list] = {lk.name: [] for lk in links}
    child_links = set()
    for j in joints:
        children[j.parent].append(j)
        child_links.add(j.child)
    roots = [lk.name for lk in links if lk.name not in child_links]
    if len(roots) != 1:
        raise ModelError(f"{where}: expected one root link, found {len(roots)}")
    terms = {}
    for i, jn in enumerate(robot.joint_names):
        vals = {c: float(ps.joint_params[c][i]) for c in ("ia", "fv", "fc") if c in ps.joint_params}
        for c, v in vals.items():
            if v < 0:
                raise IdentError(f"cannot export joint '{jn}': negative {c} {v:g}; use a consistent fit")
        terms[jn] = vals

    def num(x) -> str:
        x = round_sig(x, digits)
        return "0" if x == 0 else format(x, f".{digits}g")

    def nums(v) -> str:
        return " ".join(num(x) for x in v)

    def body(link: str, depth: int, joint=None) -> list[str]:
        ind = "  " * depth
        attrs = f"name={quoteattr(link)}"
        if joint is not None:
            attrs += f' pos="{nums(joint.p)}"'
            if not np.allclose(joint.R, np.eye(3), atol=1e-15):
                attrs += f' quat="{nums(_quat(joint.R))}"'
        out = [f"{ind}<body {attrs}>"]
        pi = link_vector(ho, link, own[link])
        if pi[0] > 0:
            m, c, I = from_vector(pi)
            full = [I[0, 0], I[1, 1], I[2, 2], I[0, 1], I[0, 2], I[1, 2]]
            out.append(f'{ind}  <inertial pos="{nums(c)}" mass="{num(m)}" fullinertia="{nums(full)}"/>')
        if joint is not None and joint.type != "fixed":
            kind = "slide" if joint.type == "prismatic" else "hinge"
            ja = f'name={quoteattr(joint.name)} type="{kind}" axis="{nums(joint.axis)}"'
            if joint.type in ("revolute", "prismatic") and np.isfinite(joint.lower) and np.isfinite(joint.upper):
                ja += f' limited="true" range="{num(joint.lower)} {num(joint.upper)}"'
            else:
                ja += ' limited="false"'
            t = terms.get(joint.name, {})
            for code, key in (("ia", "armature"), ("fv", "damping"), ("fc", "frictionloss")):
                if t.get(code):
                    ja += f' {key}="{num(t[code])}"'
            out.append(f"{ind}  <joint {ja}/>")
        for j in children[link]:
            out += body(j.child, depth + 1, j)
        out.append(f"{ind}</body>")
        return out

    g = robot.gravity
    lines = [
        f"<mujoco model={quoteattr(name)}>",
        f"  <!-- written by ident export from {Path(where).name}: identified inertials, armature (ia), damping (fv), "
        "frictionloss (fc); no geometry -->",
    ]
    if "fo" in ps.joint_params and np.any(ps.joint_params["fo"] != 0):
        lines.append("  <!-- the constant joint offsets (fo) of the parameter file have no MJCF field and are not included -->")
    lines += [
        '  <compiler angle="radian" inertiafromgeom="false" autolimits="true"/>',
        f'  <option gravity="{nums(g)}"/>',
        "  <worldbody>",
    ]
    # the root link is the fixed base: it is MuJoCo's world body (its inertia never acts)
    lines.append(f"    <!-- root link {roots[0]}: the world body -->")
    for j in children[roots[0]]:
        lines += body(j.child, 2, j)
    lines += ["  </worldbody>", "</mujoco>", ""]
    return "\n".join(lines)


def export_mjcf(urdf_path, robot: Robot, ps: ParameterSet, out_path, digits: int = DIGITS) -> None:
    """Write the MJCF model (see :func:`mjcf_text`) of the arm in `urdf_path`, atomically."""
    p = Path(urdf_path)
    text = description_text(p, robot, "MJCF export")
    write_text(out_path, mjcf_text(text, robot, ps, where=str(p), digits=digits))


__all__ = ["mjcf_text", "export_mjcf"]
