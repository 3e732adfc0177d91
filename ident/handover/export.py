"""Export identified parameters: into the robot's URDF (inertial elements rewritten) or as JSON/YAML.

URDF export edits the text of the original file: only the ``<inertial>`` elements of identified
links change (their byte spans are replaced), so comments, formatting, visuals, collisions, joints
and every other element stay byte-for-byte as they were.

Each identified body is written as the link that its joint moves (the URDF child link): origin at
the centre of mass with ``rpy="0 0 0"`` (the link's axes) and the inertia about the COM. What each
link receives (split back of merged bodies, description values where the data see nothing,
rounding to `digits` significant digits that keeps every link physical) is decided by
:mod:`ident.handover.inertials`.

With ``friction=True`` each identified joint's ``<dynamics damping=... friction=...>`` element is
written (or added) from the viscous (fv) and Coulomb (fc) coefficients, the URDF fields simulators
read. URDF has no field for the armature (rotor inertia): it stays in the parameter file (and goes
into the MJCF export, :mod:`ident.handover.mjcf`).
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np

from ..arm.model import Robot
from ..arm.parameters import ParameterSet
from ..arm.spatial import from_vector
from ..arm.urdf import urdf_specs
from ..errors import IdentError, ModelError
from ..fileio import write_text
from .inertials import DIGITS, hand_over, rounded_form
from .paramfile import save_parameters

_LINK_OPEN = re.compile(r"<link\b[^>]*?>", re.S)
_NAME = re.compile(r"""\bname\s*=\s*(["'])(.*?)\1""", re.S)
_INERTIAL = re.compile(r"<inertial\b[^>]*?/>|<inertial\b.*?</inertial\s*>", re.S)
_COMMENT = re.compile(r"<!--.*?-->", re.S)
_JOINT_OPEN = re.compile(r"<joint\b[^>]*?>", re.S)
_TYPE = re.compile(r"""\btype\s*=""")
_DYNAMICS = re.compile(r"<dynamics\b[^>]*?/>|<dynamics\b.*?</dynamics\s*>", re.S)


def _num(x: float, digits: int = 17) -> str:
    return format(float(x), f".{int(digits)}g")


def inertial_xml(pi: np.ndarray, indent: str, step: str = "  ", note: str = "", digits: int = 17) -> str:
    """URDF ``<inertial>`` element text for a body 10-vector `pi` (10,) in the link frame, numbers
    with `digits` significant digits.

    `indent` is the whitespace before the element, `step` one indentation level. The first line
    carries no indentation (the caller places it).
    """
    if digits >= 17:
        m, c, I = from_vector(pi)
    else:
        m, c, I = rounded_form(pi, digits)

    def num(x):  # the numbers were rounded: print them with the same digits
        return _num(x, digits)

    inner = indent + step
    lines = []
    if note:
        lines.append(f"<!-- {note} -->")
        lines.append(indent + "<inertial>")
    else:
        lines.append("<inertial>")
    lines += [
        f'{inner}<origin xyz="{num(c[0])} {num(c[1])} {num(c[2])}" rpy="0 0 0"/>',
        f'{inner}<mass value="{num(m)}"/>',
        f'{inner}<inertia ixx="{num(I[0, 0])}" ixy="{num(I[0, 1])}" ixz="{num(I[0, 2])}" '
        f'iyy="{num(I[1, 1])}" iyz="{num(I[1, 2])}" izz="{num(I[2, 2])}"/>',
        f"{indent}</inertial>",
    ]
    return "\n".join(lines)


def _masked(text: str) -> str:
    """`text` with XML comments blanked (same length) so searches never match inside comments."""
    return _COMMENT.sub(lambda m: " " * len(m.group(0)), text)


def _link_spans(text: str) -> dict[str, tuple[int, int, int, int]]:
    """{link name: (start, open_end, close_start, end)} of each ``<link>`` element; self-closing links
    have open_end == close_start == end."""
    masked = _masked(text)
    spans = {}
    for m in _LINK_OPEN.finditer(masked):
        nm = _NAME.search(m.group(0))
        if nm is None:
            continue
        name = nm.group(2)
        if m.group(0).rstrip().endswith("/>"):
            spans[name] = (m.start(), m.end(), m.end(), m.end())
            continue
        close = masked.find("</link", m.end())
        if close < 0:
            raise ModelError(f"link '{name}': no closing </link>")
        end = masked.find(">", close) + 1
        spans[name] = (m.start(), m.end(), close, end)
    return spans


def _line_indent(text: str, pos: int) -> str:
    start = text.rfind("\n", 0, pos) + 1
    head = text[start:pos]
    return head if head.strip() == "" else ""


def _joint_spans(text: str, masked: str) -> dict[str, tuple[int, int, int, int]]:
    """{joint name: (start, open_end, close_start, end)} of the top-level ``<joint type=...>`` elements
    (``<joint>`` inside ``<transmission>`` has no type and is skipped)."""
    spans = {}
    for m in _JOINT_OPEN.finditer(masked):
        opener = m.group(0)
        nm = _NAME.search(opener)
        if nm is None or not _TYPE.search(opener):
            continue
        if opener.rstrip().endswith("/>"):
            spans[nm.group(2)] = (m.start(), m.end(), m.end(), m.end())
            continue
        close = masked.find("</joint", m.end())
        spans[nm.group(2)] = (m.start(), m.end(), close, masked.find(">", close) + 1)
    return spans


def _friction_edits(text: str, masked: str, robot: Robot, ps: ParameterSet, where: str, digits: int = DIGITS) -> list[tuple[int, int, str]]:
    if "fv" not in ps.joint_params and "fc" not in ps.joint_params:
        raise IdentError("friction export: the parameter set has no viscous (fv) or Coulomb (fc) terms")
    spans = _joint_spans(text, masked)
    edits = []
    for i, joint in enumerate(robot.joint_names):
        if joint not in spans:
            raise ModelError(f"{where}: joint '{joint}' of the model is not in the file")
        fv = float(ps.joint_params.get("fv", np.zeros(robot.n))[i])
        fc = float(ps.joint_params.get("fc", np.zeros(robot.n))[i])
        if fv < 0 or fc < 0:
            raise IdentError(f"cannot export joint '{joint}': negative friction (fv {fv:g}, fc {fc:g}); use a consistent fit")
        element = f'<dynamics damping="{_num(fv, digits)}" friction="{_num(fc, digits)}"/>'
        start, open_end, close_start, end = spans[joint]
        found = _DYNAMICS.search(masked[open_end:close_start])
        if found is not None:
            edits.append((open_end + found.start(), open_end + found.end(), element))
        elif open_end == end:
            raise ModelError(f"{where}: joint '{joint}' is an empty element")
        else:
            indent = _line_indent(text, start)
            edits.append((close_start, close_start, f"  {element}\n{indent}"))
    return edits


def export_urdf_text(text: str, robot: Robot, ps: ParameterSet, where: str = "URDF", friction: bool = False,
                     digits: int = DIGITS, notes: list | None = None) -> str:
    """Rewrite the ``<inertial>`` elements of `text` (the URDF `robot` was loaded from) with `ps`.

    Raises :class:`IdentError` naming the link when a body is not physically consistent (it has no
    URDF form: mass <= 0 or an inertia about the COM that is not positive definite or violates the
    triangle inequality), and :class:`ModelError` when a link of the model is missing from `text`.
    `friction` also writes each joint's ``<dynamics damping friction>`` from fv and fc. `digits`
    significant digits (raised per link where rounding would break consistency); `notes`, when a
    list, receives one line per decision worth telling (split back, folded links, kept links).
    """
    _, links, joints = urdf_specs(text, where)
    ho = hand_over(robot, ps, links, joints, digits)
    if notes is not None:
        notes += ho.notes
    ps = ps.check_robot(robot, where="parameter set")
    spans = _link_spans(text)
    edits = []  # (start, end, replacement)
    masked = _masked(text)
    for link, li in ho.links.items():
        if link not in spans:
            raise ModelError(f"{where}: link '{link}' of the model is not in the file")
        if li.params is None and not li.removed:
            continue
        start, open_end, close_start, end = spans[link]
        found = _INERTIAL.search(masked[open_end:close_start])
        if li.removed:
            if found is not None:
                a, b = open_end + found.start(), open_end + found.end()
                edits.append((a, b, f"<!-- inertial moved to link '{li.into}' (merged body) by ident export -->"))
            continue
        if found is not None:
            a, b = open_end + found.start(), open_end + found.end()
            indent = _line_indent(text, a)
            edits.append((a, b, inertial_xml(li.params, indent, note=li.note, digits=li.digits)))
        else:
            link_indent = _line_indent(text, start)
            indent = link_indent + "  "
            xml = indent + inertial_xml(li.params, indent, note=li.note, digits=li.digits)
            if open_end == end:  # self-closing <link .../>: open it
                opener = text[start:open_end].rstrip()
                opener = opener[:-2].rstrip() + ">"
                edits.append((start, end, f"{opener}\n{xml}\n{link_indent}</link>"))
            else:
                # `</link>` sits after the link's own indentation: add one level before the element
                edits.append((close_start, close_start, f"  {xml.lstrip()}\n{link_indent}"))
    if friction:
        edits += _friction_edits(text, masked, robot, ps, where, digits)
    out = text
    for a, b, rep in sorted(edits, key=lambda e: e[0], reverse=True):
        out = out[:a] + rep + out[b:]
    return out


def description_text(path: Path, robot: Robot, what: str) -> str:
    """The text of the URDF `path` that `robot` was read from, for an export (`what` names it in
    errors): refused for a robot described otherwise (a DH file has no URDF to rewrite)."""
    if robot.source_kind != "urdf":
        raise IdentError(f"{path}: {what} needs the robot's URDF description, got a {robot.source_kind or 'non-URDF'} file")
    try:
        return path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelError(f"{path}: cannot read ({exc})") from None


def export_urdf(urdf_path, robot: Robot, ps: ParameterSet, out_path, friction: bool = False, digits: int = DIGITS) -> list[str]:
    """Write a copy of `urdf_path` with the identified inertial elements (see :func:`export_urdf_text`),
    atomically; returns the notes on how merged bodies were split."""
    p = Path(urdf_path)
    text = description_text(p, robot, "URDF export")
    notes: list[str] = []
    write_text(out_path, export_urdf_text(text, robot, ps, where=str(p), friction=friction, digits=digits, notes=notes))
    return notes


def export_parameters(ps: ParameterSet, out_path, fmt: str) -> None:
    """Write the parameter set as ``json`` or ``yaml`` (the parameter-file layout), atomically."""
    if fmt == "yaml":
        save_parameters(out_path, ps)
    elif fmt == "json":
        write_text(out_path, json.dumps(ps.to_dict(), indent=2) + "\n")
    else:
        raise IdentError(f"--format: '{fmt}' is not one of urdf, json, yaml")
