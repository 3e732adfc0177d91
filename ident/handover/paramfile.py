"""The parameter file: an identified (or reference) model of an arm, as YAML with a format version.

Layout (format 1; keys in this order, units SI, every inertial quantity in the link's own frame,
i.e. the URDF child-link frame of the joint that moves it)::

    format: ident-parameters/1
    robot: panda                      # name of the robot description
    joints: [j1, j2, ...]             # identified joints, in model order
    terms: [fv, fc, ia]               # per-joint terms carried by the model
    links:                            # one entry per moving body, in joint order
      link1:
        joint: j1
        mass: 3.2                     # kg
        com: [x, y, z]                # m, centre of mass in the link frame
        inertia_com: {xx: .., xy: .., xz: .., yy: .., yz: .., zz: ..}   # kg m^2, about the COM
        physical: true                # pseudo-inertia positive semidefinite
      ...
    joint_terms:                      # per joint: fv N m s/rad, fc N m, fo N m, ia kg m^2
      j1: {fv: .., fc: .., ia: ..}    # (N s/m, N, N, kg for a prismatic joint)
    base_parameters:                  # optional: the identifiable combinations
      - {name: link2.zzR, value: .., std: .., relation: "link2.zzR = link2.zz + ..."}
    context:                          # optional (files from 'ident fit' and 'ident prior' have it):
      description: panda.urdf         #   the description file the model belongs to (its name)
      locked: {finger1: 0.02}         #   joints locked at positions (rad or m) while identifying
      gravity: [0, 0, -9.81]          #   m/s^2 in the base frame
      conditioning: {cutoff: 10, ...} #   log settings the fit used (low-pass Hz, derivative, slow velocity, ...)
    method: {name: consistent, ...}   # optional: how the values were obtained
    data: {files: [...], samples: N}  # optional: the data used
    diagnostics: {...}                # optional: fit diagnostics (condition number, residuals, ...)
    collision:                        # optional: torque-residual collision thresholds ('ident check --out')
      false_alarm_rate: 0.0001        #   per sample, the rate the thresholds were set for
      joints: {j1: {threshold: .., heldout_rate: ..}, ...}   # N m (N); rate seen on the held-out log

Commands that take a parameter file (check, export, payload, simulate) use the context: the joint
selection, locks and gravity (and for check and payload the conditioning) come from the file, and
an option that contradicts it is refused with one line naming both values.

A link whose mass is not positive (possible only for an unconstrained least-squares realization)
has no centre of mass; it is stored in first-moment form instead: ``mass``, ``first_moment``
(kg m) and ``inertia_origin`` (kg m^2, about the link-frame origin), with ``physical: false``.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import yaml

from ..arm.model import JOINT_TERMS, Robot, parse_terms
from ..arm.parameters import FORMAT, SYM_KEYS, BaseTable, ParameterSet
from ..arm.spatial import sym_to_matrix, to_vector
from ..errors import DataError, IdentError
from ..fileio import read_yaml, write_text
from ..intake import number, shown

_TOP_KEYS = ("format", "robot", "joints", "terms", "links", "joint_terms", "base_parameters", "context", "method", "data",
             "diagnostics", "collision")


_REQUIRED = ("format", "robot", "joints", "terms", "links", "joint_terms")


def save_parameters(path, ps: ParameterSet) -> None:
    """Write `ps` to `path` as YAML (format :data:`FORMAT`), atomically."""
    header = (
        "# ident parameter file. SI units; every link quantity is in that link's own frame.\n"
        "# mass kg, com m, inertia_com kg m^2 about the COM; joint_terms: fv N m s/rad, fc N m, fo N m,\n"
        "# ia kg m^2 (N s/m, N, N, kg for prismatic joints).\n"
    )
    write_text(path, header + yaml.safe_dump(ps.to_dict(), sort_keys=False, default_flow_style=None, width=120))


def load_parameters(path, robot: Robot | None = None) -> ParameterSet:
    """Read a parameter file; with `robot`, check it belongs to that model and reorder to its joints.

    Raises :class:`DataError` naming the file and key on any problem (unknown or missing keys, wrong
    counts, non-numbers, NaN, links or joints that do not match).
    """
    p = Path(path)
    _refuse_description(p)
    doc = read_yaml(p, "parameter file", DataError)
    ps = parameter_set_from_dict(doc, where=str(p))
    if robot is not None:
        ps = ps.check_robot(robot, where=str(p))
    return ps


def parameter_set_from_dict(doc, where: str = "parameters") -> ParameterSet:
    """Validate a parsed parameter document (see the module docstring) -> :class:`ParameterSet`."""
    if not isinstance(doc, dict):
        raise DataError(f"{where}: expected a mapping with key 'format: {FORMAT}'")
    unknown = [k for k in doc if k not in _TOP_KEYS]
    if unknown:
        raise DataError(f"{where}: unknown key '{unknown[0]}' (allowed: {', '.join(_TOP_KEYS)})")
    for k in _REQUIRED:
        if k not in doc:
            raise DataError(f"{where}: missing key '{k}'")
    if doc["format"] != FORMAT:
        raise DataError(f"{where}: format '{doc['format']}' is not supported (expected '{FORMAT}')")
    joints = doc["joints"]
    if not isinstance(joints, list) or not joints or not all(isinstance(j, str) for j in joints):
        raise DataError(f"{where}: 'joints' must be a non-empty list of joint names")
    if len(set(joints)) != len(joints):
        raise DataError(f"{where}: 'joints' lists a joint twice")
    n = len(joints)
    terms_raw = doc["terms"] or []
    if not isinstance(terms_raw, list):
        raise DataError(f"{where}: 'terms' must be a list of term codes ({', '.join(JOINT_TERMS)})")
    try:
        terms = parse_terms(terms_raw)
    except IdentError as exc:
        raise DataError(f"{where}: terms: {exc}") from None
    links = doc["links"]
    if not isinstance(links, dict) or len(links) != n:
        raise DataError(f"{where}: 'links' must map {n} link names (one per joint) to their parameters")
    inertial = np.zeros((n, 10))
    bodies = [None] * n
    for body, entry in links.items():
        w = f"{where}: links.{body}"
        if not isinstance(entry, dict):
            raise DataError(f"{w}: expected a mapping")
        joint = entry.get("joint")
        if joint not in joints:
            raise DataError(f"{w}.joint: '{joint}' is not one of the listed joints")
        i = joints.index(joint)
        if bodies[i] is not None:
            raise DataError(f"{w}.joint: joint '{joint}' already moves link '{bodies[i]}'")
        bodies[i] = str(body)
        inertial[i] = _link_vector(entry, w)
    jt = doc["joint_terms"] or {}
    if not isinstance(jt, dict):
        raise DataError(f"{where}: 'joint_terms' must map joint names to their term coefficients")
    for j in jt:
        if j not in joints:
            raise DataError(f"{where}: joint_terms.{j}: not one of the listed joints")
    jp = {c: np.zeros(n) for c in terms}
    for i, j in enumerate(joints):
        entry = jt.get(j, {} if not terms else None)
        if entry is None:
            raise DataError(f"{where}: joint_terms.{j}: missing (terms {list(terms)} are declared)")
        if not isinstance(entry, dict):
            raise DataError(f"{where}: joint_terms.{j}: expected a mapping of term codes to numbers")
        for c in entry:
            if c not in terms:
                raise DataError(f"{where}: joint_terms.{j}.{c}: not a declared term (terms: {list(terms)})")
        for c in terms:
            if c not in entry:
                raise DataError(f"{where}: joint_terms.{j}.{c}: missing")
            jp[c][i] = _num(entry[c], f"{where}: joint_terms.{j}.{c}")
    base = None
    if doc.get("base_parameters") is not None:
        base = _base_table(doc["base_parameters"], f"{where}: base_parameters")
    extras = {}
    for key in ("method", "data", "diagnostics", "collision"):
        val = doc.get(key)
        if val is not None and not isinstance(val, dict):
            raise DataError(f"{where}: '{key}' must be a mapping")
        extras[key] = val or {}
    extras["context"] = _context(doc.get("context"), f"{where}: context")
    return ParameterSet(
        robot_name=str(doc["robot"]),
        joint_names=list(joints),
        body_names=bodies,
        inertial=inertial,
        joint_params=jp,
        terms=terms,
        base=base,
        **extras,
    )


def _refuse_description(p: Path) -> None:
    """A robot description given where a parameter file belongs: say so, and how to make one."""
    looks_xml = p.suffix.lower() in (".urdf", ".xml")
    if not looks_xml and p.is_file():
        try:
            with open(p, "rb") as fh:
                looks_xml = fh.read(256).lstrip().startswith(b"<")
        except OSError:
            return
    if looks_xml:
        raise DataError(f"{p}: is a robot description (XML), not a parameter file; write one from it with 'ident prior {p} --out PARAMS.yaml'")


def _context(ctx, where: str) -> dict:
    if ctx is None:
        return {}
    if not isinstance(ctx, dict):
        raise DataError(f"{where}: expected a mapping")
    for k in ctx:
        if k not in ("description", "locked", "gravity", "conditioning"):
            raise DataError(f"{where}: unknown key '{k}' (allowed: description, locked, gravity, conditioning)")
    out = {"description": str(ctx.get("description") or "")}
    locked = ctx.get("locked") or {}
    if not isinstance(locked, dict):
        raise DataError(f"{where}.locked: expected a mapping of joint names to positions")
    out["locked"] = {str(j): _num(v, f"{where}.locked.{j}") for j, v in locked.items()}
    if ctx.get("gravity") is not None:
        out["gravity"] = _vec(ctx["gravity"], 3, f"{where}.gravity").tolist()
    cond = ctx.get("conditioning")
    if cond is not None:
        if not isinstance(cond, dict):
            raise DataError(f"{where}.conditioning: expected a mapping")
        out["conditioning"] = dict(cond)
    return out


def _num(x, where: str, quantity: str = "parameter") -> float:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        raise DataError(f"{where}: '{shown(x, quotes=False)}' is not a number")
    if isinstance(x, float) and not math.isfinite(x):
        raise DataError(f"{where}: value is not finite")
    return number(x, where, quantity, DataError)  # huge integers and magnitudes (ident.intake)


def _vec(x, size: int, where: str) -> np.ndarray:
    if not isinstance(x, list) or len(x) != size:
        raise DataError(f"{where}: expected a list of {size} numbers")
    return np.array([_num(v, f"{where}[{k}]") for k, v in enumerate(x)])


def _sym(x, where: str) -> np.ndarray:
    if not isinstance(x, dict) or set(x) != set(SYM_KEYS):
        raise DataError(f"{where}: expected the six entries {', '.join(SYM_KEYS)}")
    return np.array([_num(x[k], f"{where}.{k}") for k in SYM_KEYS])


def _link_vector(entry: dict, w: str) -> np.ndarray:
    com_form = {"joint", "mass", "com", "inertia_com", "physical"}
    moment_form = {"joint", "mass", "first_moment", "inertia_origin", "physical"}
    keys = set(entry)
    if "com" in keys or "inertia_com" in keys:
        allowed, form = com_form, "com"
    else:
        allowed, form = moment_form, "moment"
    for k in entry:
        if k not in allowed:
            raise DataError(f"{w}: unknown key '{k}' (allowed: {', '.join(sorted(allowed))})")
    for k in allowed - {"physical"}:
        if k not in entry:
            raise DataError(f"{w}: missing key '{k}'")
    m = _num(entry["mass"], f"{w}.mass", "mass")
    if form == "com":
        if m < 0:
            raise DataError(f"{w}.mass: {m:g} kg is negative (a negative mass has no centre of mass; use first_moment/inertia_origin)")
        c = _vec(entry["com"], 3, f"{w}.com")
        I_c = sym_to_matrix(_sym(entry["inertia_com"], f"{w}.inertia_com"))
        return to_vector(m, c, I_c)
    h = _vec(entry["first_moment"], 3, f"{w}.first_moment")
    return np.concatenate([[m], h, _sym(entry["inertia_origin"], f"{w}.inertia_origin")])


def _base_table(rows, where: str) -> BaseTable:
    if not isinstance(rows, list):
        raise DataError(f"{where}: expected a list of {{name, value, std, relation}} entries")
    names, vals, stds, rels = [], [], [], []
    for k, row in enumerate(rows):
        w = f"{where}[{k}]"
        if not isinstance(row, dict) or "name" not in row or "value" not in row:
            raise DataError(f"{w}: expected a mapping with at least 'name' and 'value'")
        for key in row:
            if key not in ("name", "value", "std", "relation"):
                raise DataError(f"{w}: unknown key '{key}' (allowed: name, value, std, relation)")
        names.append(str(row["name"]))
        vals.append(_num(row["value"], f"{w}.value"))
        std = row.get("std")
        stds.append(float("nan") if std is None else _num(std, f"{w}.std"))
        rels.append(str(row.get("relation") or row["name"]))
    return BaseTable(names, np.array(vals), np.array(stds), rels)


__all__ = ["save_parameters", "load_parameters", "parameter_set_from_dict"]
