"""What each link of the description receives when identified parameters are handed over.

The model identifies one rigid body per identified joint; a body may be several links of the
description joined by fixed joints or by joints locked while identifying (a hand and its fingers).
The data see only that body's total, so the hand-over splits it back:

1. **Parts the data cannot see keep the description's values.** Inertial columns that never
   affect the joint torques (structurally zero columns of the regressor, e.g. the mass of the
   first link of a vertical-axis arm) are reset to the description's values; the torques do not
   change. A link whose result then equals its description (to 1e-12 relative) is left as written.
2. **Split back.** Every link merged into a body keeps its own description inertial; the link the
   joint moves receives the identified total minus what the others contribute (each carried into
   the body frame at the lock positions). The model at the locks is reproduced exactly, and joints
   that were locked only for identification can move in a simulator with sensible inertia.
   When that remainder is not a physical body, links merged through fixed joints are folded onto
   the moved link instead (they can never move relative to it); links merged through a lock cannot
   be folded without making the mass matrix singular when they move, so that case is refused.
3. **Rounding.** Numbers are written with `digits` significant digits (default 7); entries below
   1e-12 of the largest of the same quantity (COM vector, inertia matrix) are written as zero. If
   rounding breaks physical consistency (a body at the edge of the triangle inequality), more
   digits are used for that link until it is consistent again.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..arm.base import base_parameters
from ..arm.model import Robot
from ..arm.parameters import ParameterSet
from ..arm.spatial import check_physical, from_vector, to_vector, transform_params
from ..errors import IdentError

#: Default significant digits of the numbers written to URDF and MJCF.
DIGITS = 7


@dataclass
class LinkInertial:
    """What one description link gets: `params` (10,) in its own frame, or None to keep the
    description's element untouched; `removed` when its inertia was folded onto `into`."""

    link: str
    params: np.ndarray | None = None
    removed: bool = False
    into: str = ""
    note: str = ""
    digits: int = DIGITS


@dataclass
class HandOver:
    """Per description link (name -> :class:`LinkInertial`) plus notes on what was done."""

    links: dict[str, LinkInertial] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)


def _physical(pi) -> bool:
    try:
        check_physical(pi, "link")
        return True
    except IdentError:
        return False


def round_sig(x: float, digits: int) -> float:
    """`x` rounded to `digits` significant digits."""
    return float(f"{float(x):.{int(digits)}g}")


def rounded_form(pi: np.ndarray, digits: int):
    """(mass, com (3,), inertia about the COM (3, 3)) of `pi` (10,) rounded to `digits` significant
    digits, entries below 1e-12 of the largest of their quantity set to zero."""
    m, c, I = from_vector(pi)
    cs = np.abs(c).max()
    c = np.array([0.0 if abs(v) <= 1e-12 * cs else round_sig(v, digits) for v in c])
    Is = np.abs(I).max()
    Ir = np.array([[0.0 if abs(I[a, b]) <= 1e-12 * Is else round_sig(I[a, b], digits) for b in range(3)] for a in range(3)])
    Ir = 0.5 * (Ir + Ir.T)
    return round_sig(m, digits), c, Ir


def safe_digits(pi: np.ndarray, digits: int) -> int:
    """Fewest digits >= `digits` whose rounded form of `pi` is still physically consistent."""
    for d in range(int(digits), 18):
        if _physical(to_vector(*rounded_form(pi, d))):
            return d
    return 17


def _seen(robot: Robot, ps: ParameterSet) -> np.ndarray:
    """(n, 10) parameters with the never-seen inertial columns set to the description's values."""
    base = base_parameters(robot, ps.terms)
    out = ps.inertial.copy()
    zero = [k for k in base.zero if k < 10 * robot.n]
    flat = out.reshape(-1)
    flat[zero] = robot.prior.reshape(-1)[zero]
    out = flat.reshape(robot.n, 10)
    for i in range(robot.n):  # resetting may not keep a body physical: then keep the fit's body
        if not _physical(out[i]) and _physical(ps.inertial[i]):
            out[i] = ps.inertial[i]
    return out


def _via_lock(robot: Robot, joints, group: list[str]) -> set[str]:
    """Links of `group` reached from its root through at least one locked (movable) joint."""
    by_child = {j.child: j for j in joints}
    out = set()
    for link in group[1:]:
        cur = link
        while cur != group[0] and cur in by_child:
            j = by_child[cur]
            if j.name in robot.locked:
                out.add(link)
                break
            cur = j.parent
    return out


def hand_over(robot: Robot, ps: ParameterSet, links, joints, digits: int = DIGITS) -> HandOver:
    """Split `ps` (identified for `robot`) over the description's links (see the module docstring).

    Parameters
    ----------
    robot : the model `ps` was identified for (its locks decide the split).
    ps : identified parameters; every body must be physically consistent.
    links, joints : the description's ``LinkSpec`` and ``JointSpec`` lists (:func:`ident.arm.urdf.urdf_specs`).
    digits : significant digits the numbers will be written with.
    """
    ps = ps.check_robot(robot, where="parameter set")
    for i, body in enumerate(robot.body_names):
        check_physical(ps.inertial[i], f"cannot export link '{body}'")
    own = {lk.name: np.asarray(lk.params, dtype=float) for lk in links}
    seen = _seen(robot, ps)
    out = HandOver()
    unchanged = []
    for i, group in enumerate(robot.merged):
        root = group[0]
        contrib = {}
        for link in group[1:]:
            fr = robot.frames[link]
            contrib[link] = transform_params(own[link], fr.R, fr.p) if np.any(own[link]) else np.zeros(10)
        locked_part = _via_lock(robot, joints, group)
        rest = seen[i] - sum(contrib.values(), np.zeros(10))
        folded = []
        if not _physical(rest):
            rest = seen[i] - sum((contrib[k] for k in locked_part), np.zeros(10))
            folded = [k for k in group[1:] if k not in locked_part and np.any(own[k])]
            if not _physical(rest):
                what = ", ".join(sorted(locked_part)) or ", ".join(group[1:])
                raise IdentError(
                    f"cannot export link '{root}': the identified body minus the description's {what} is not a physical body; "
                    f"the data disagree with the description of the parts locked for identification (check their masses)")
            out.notes.append(f"{root}: the identified body minus its merged links was not physical; the fixed link(s) "
                             f"{', '.join(folded)} were folded onto it")
        for link in folded:
            out.links[link] = LinkInertial(link, removed=True, into=root)
        scale = max(np.abs(own[root]).max(), 1e-300)
        if np.any(own[root]) and np.all(np.abs(rest - own[root]) <= 1e-12 * scale):
            out.links[root] = LinkInertial(root)
            unchanged.append(root)
            continue
        kept = [k for k in group[1:] if k not in folded and np.any(own[k])]
        note = "identified by ident" + (f"; the description's {', '.join(kept)} kept as written (split back)" if kept else "")
        if folded:
            note += f"; includes the fixed link(s) {', '.join(folded)}"
        out.links[root] = LinkInertial(root, rest, note=note, digits=safe_digits(rest, digits))
    if unchanged:
        out.notes.append(f"the data do not change {', '.join(unchanged)}: kept as in the description")
    return out


def link_vector(ho: HandOver, link: str, own: np.ndarray) -> np.ndarray:
    """The 10-vector (10,) link `link` has after the hand-over, in its own frame, as written
    (rounded); `own` is its description's vector."""
    li = ho.links.get(link)
    if li is None or (li.params is None and not li.removed):
        return np.asarray(own, dtype=float)
    if li.removed:
        return np.zeros(10)
    return to_vector(*rounded_form(li.params, li.digits))
