"""Turn a parsed description (links and joints) into a :class:`ident.arm.model.Robot`.

Shared by the URDF and DH readers: checks the tree (one root, no cycles, known links), applies the
joint selection (unselected movable joints are locked at given positions) and merges every link
reached through fixed or locked joints into the body of the nearest identified joint above it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import ModelError
from .model import PRISMATIC, REVOLUTE, Frame, Robot
from .spatial import axis_angle, transform_params

MOVABLE = ("revolute", "continuous", "prismatic")
SUPPORTED = MOVABLE + ("fixed",)
REJECTED = {"floating": "a floating joint", "planar": "a planar joint"}


@dataclass
class LinkSpec:
    """A link: name and inertial 10-vector (10,) in its own frame (zeros when massless)."""

    name: str
    params: np.ndarray = field(default_factory=lambda: np.zeros(10))


@dataclass
class JointSpec:
    """A joint as written in the description (origin pose in the parent link frame, axis in the joint frame)."""

    name: str
    type: str
    parent: str
    child: str
    R: np.ndarray
    p: np.ndarray
    axis: np.ndarray
    lower: float = -np.inf
    upper: float = np.inf
    velocity: float = np.inf
    effort: float = np.inf
    mimic: bool = False


def build_robot(name, links, joints, *, selected=None, locked=None, gravity=None, source="", source_kind="", where=None) -> Robot:
    """Check the tree, lock unselected joints, merge fixed bodies and return the :class:`Robot`.

    `links` is a list of :class:`LinkSpec`, `joints` a list of :class:`JointSpec` in file order.
    `selected` lists the joints to identify (default: all movable ones); `locked` maps locked
    joint names to positions (rad or m; default 0). `where` names the file in messages.
    """
    where = where or name
    locked = dict(locked or {})
    link_by_name = {}
    for link in links:
        if link.name in link_by_name:
            raise ModelError(f"{where}: link '{link.name}' is defined twice")
        link_by_name[link.name] = link
    joint_by_name = {}
    child_of = {}
    for j in joints:
        if j.name in joint_by_name:
            raise ModelError(f"{where}: joint '{j.name}' is defined twice")
        joint_by_name[j.name] = j
        if j.type in REJECTED:
            raise ModelError(f"{where}: joint '{j.name}' is {REJECTED[j.type]}; ident models fixed-base arms with revolute, continuous, prismatic and fixed joints")
        if j.type not in SUPPORTED:
            raise ModelError(f"{where}: joint '{j.name}' has unknown type '{j.type}'")
        for role, ln in (("parent", j.parent), ("child", j.child)):
            if ln not in link_by_name:
                raise ModelError(f"{where}: joint '{j.name}' names {role} link '{ln}', which is not defined")
        if j.child in child_of:
            raise ModelError(f"{where}: link '{j.child}' is the child of two joints ('{child_of[j.child]}' and '{j.name}')")
        child_of[j.child] = j.name
    roots = [l.name for l in links if l.name not in child_of]
    if not roots:
        raise ModelError(f"{where}: the joints form a cycle (every link has a parent)")
    if len(roots) > 1:
        raise ModelError(f"{where}: the description has {len(roots)} unconnected root links ({', '.join(roots[:5])}); expected one base")
    root = roots[0]

    movable = [j.name for j in joints if j.type in MOVABLE]
    if selected is None:
        selected = [n for n in movable if n not in locked]
    selected = list(selected)
    for nm in selected:
        if nm not in joint_by_name:
            raise ModelError(f"{where}: no joint named '{nm}' to identify")
        if joint_by_name[nm].type not in MOVABLE:
            raise ModelError(f"{where}: joint '{nm}' is {joint_by_name[nm].type} and cannot be identified")
        if joint_by_name[nm].mimic:
            raise ModelError(f"{where}: joint '{nm}' is a mimic joint, which ident does not model; lock it or leave it out of the identified joints")
        if nm in locked:
            raise ModelError(f"{where}: joint '{nm}' is both identified and locked")
    if len(set(selected)) != len(selected):
        raise ModelError(f"{where}: a joint is selected twice")
    if not selected:
        raise ModelError(f"{where}: no movable joint to identify")
    for nm, val in locked.items():
        if nm not in joint_by_name:
            raise ModelError(f"{where}: no joint named '{nm}' to lock")
        if not np.isfinite(float(val)):
            raise ModelError(f"{where}: lock position of joint '{nm}' is not finite")
        j = joint_by_name[nm]
        # a lock beyond the limits is almost always a unit slip (degrees for radians, mm for m)
        if j.type in ("revolute", "prismatic") and not (j.lower - 1e-9 <= float(val) <= j.upper + 1e-9):
            unit = "m" if j.type == "prismatic" else "rad"
            raise ModelError(f"{where}: lock position {float(val):g} {unit} of joint '{nm}' is outside its limits [{j.lower:g}, {j.upper:g}] {unit}")
    sel = set(selected)

    children = {l.name: [] for l in links}
    for j in joints:
        children[j.parent].append(j)

    # Depth-first from the root keeps parents before children.
    placement = {root: Frame(-1, np.eye(3), np.zeros(3))}
    body_joint, body_names, parent, jtype, Rf, pf, ax = [], [], [], [], [], [], []
    lo, hi, vel, eff, cont, merged = [], [], [], [], [], []
    stack = [root]
    visited = set()
    while stack:
        ln = stack.pop()
        if ln in visited:
            raise ModelError(f"{where}: link '{ln}' is reached twice (cycle)")
        visited.add(ln)
        here = placement[ln]
        for j in reversed(children[ln]):
            R0 = here.R @ j.R
            p0 = here.p + here.R @ j.p
            if j.name in sel:
                k = len(body_names)
                body_joint.append(j.name)
                body_names.append(j.child)
                parent.append(here.body)
                jtype.append(PRISMATIC if j.type == "prismatic" else REVOLUTE)
                Rf.append(R0)
                pf.append(p0)
                ax.append(j.axis)
                cont.append(j.type == "continuous")
                lo.append(-np.inf if j.type == "continuous" else j.lower)
                hi.append(np.inf if j.type == "continuous" else j.upper)
                vel.append(j.velocity)
                eff.append(j.effort)
                merged.append([j.child])
                placement[j.child] = Frame(k, np.eye(3), np.zeros(3))
            else:
                v = float(locked.get(j.name, 0.0)) if j.type in MOVABLE else 0.0
                if j.type == "prismatic":
                    placement[j.child] = Frame(here.body, R0, p0 + R0 @ (j.axis * v))
                elif j.type in ("revolute", "continuous"):
                    placement[j.child] = Frame(here.body, R0 @ axis_angle(j.axis, v), p0)
                else:
                    placement[j.child] = Frame(here.body, R0, p0)
                if here.body >= 0:
                    merged[here.body].append(j.child)
            stack.append(j.child)
    if len(visited) != len(links):
        missing = [l.name for l in links if l.name not in visited]
        raise ModelError(f"{where}: links not connected to the base '{root}': {', '.join(missing[:5])}")

    # DFS order above is parents-first but not necessarily the file's joint order; keep it.
    n = len(body_names)
    prior = np.zeros((n, 10))
    for ln, fr in placement.items():
        if fr.body >= 0:
            prior[fr.body] += transform_params(link_by_name[ln].params, fr.R, fr.p)
    all_locked = {j.name: float(locked.get(j.name, 0.0)) for j in joints if j.type in MOVABLE and j.name not in sel}
    robot = Robot(
        name=name,
        joint_names=body_joint,
        body_names=body_names,
        parent=np.array(parent),
        joint_type=np.array(jtype),
        R_fix=np.array(Rf),
        p_fix=np.array(pf),
        axis=np.array(ax),
        lower=np.array(lo),
        upper=np.array(hi),
        velocity_limit=np.array(vel),
        effort_limit=np.array(eff),
        prior=prior,
        continuous=np.array(cont),
        base_name=root,
        frames=placement,
        merged=merged,
        locked=all_locked,
        source=source,
        source_kind=source_kind,
    )
    if gravity is not None:
        robot.gravity = np.asarray(gravity, dtype=float)
    return robot
