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
    method: {name: consistent, ...}   # optional: how the values were obtained
    data: {files: [...], samples: N}  # optional: the data used
    diagnostics: {...}                # optional: fit diagnostics (condition number, residuals, ...)

A link whose mass is not positive (possible only for an unconstrained least-squares realization)
has no centre of mass; it is stored in first-moment form instead: ``mass``, ``first_moment``
(kg m) and ``inertia_origin`` (kg m^2, about the link-frame origin), with ``physical: false``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import yaml

from .errors import DataError, IdentError
from .fileio import read_yaml, write_text
from .model import JOINT_TERMS, Robot, parse_terms
from .spatial import from_vector, matrix_to_sym, pseudo_inertia, sym_to_matrix, to_vector

FORMAT = "ident-parameters/1"
_TOP_KEYS = ("format", "robot", "joints", "terms", "links", "joint_terms", "base_parameters", "method", "data", "diagnostics")
_REQUIRED = ("format", "robot", "joints", "terms", "links", "joint_terms")
_SYM = ("xx", "xy", "xz", "yy", "yz", "zz")
#: Relative tolerance on the smallest pseudo-inertia eigenvalue for ``physical: true``.
PHYSICAL_TOL = 1e-9


@dataclass
class BaseTable:
    """Base-parameter estimates: names (b,), values (b,), standard deviations (b,) (NaN when unknown),
    and the readable regrouping relation of each."""

    names: list[str]
    values: np.ndarray
    std: np.ndarray
    relations: list[str]

    def __post_init__(self) -> None:
        b = len(self.names)
        self.values = np.asarray(self.values, dtype=float).reshape(b)
        self.std = np.asarray(self.std, dtype=float).reshape(b)
        self.relations = list(self.relations) if self.relations is not None else list(self.names)


@dataclass
class ParameterSet:
    """A full model of the arm's dynamics: inertial parameters of each body plus per-joint terms.

    Attributes
    ----------
    robot_name : name of the robot description.
    joint_names, body_names : (n,) names, model order (body i is moved by joint i).
    inertial : (n, 10) per-body ``[m, mx, my, mz, xx, xy, xz, yy, yz, zz]`` in the body frame,
        inertia about the body-frame origin (kg, kg m, kg m^2).
    joint_params : {term code: (n,) coefficients} for the codes in `terms`.
    terms : joint-term codes carried (canonical order).
    base : optional :class:`BaseTable`.
    method, data, diagnostics : optional free-form dicts (plain YAML types).
    """

    robot_name: str
    joint_names: list[str]
    body_names: list[str]
    inertial: np.ndarray
    joint_params: dict[str, np.ndarray] = field(default_factory=dict)
    terms: tuple[str, ...] = ()
    base: BaseTable | None = None
    method: dict = field(default_factory=dict)
    data: dict = field(default_factory=dict)
    diagnostics: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        n = len(self.joint_names)
        self.terms = parse_terms(self.terms)
        self.inertial = np.asarray(self.inertial, dtype=float).reshape(n, 10)
        jp = {}
        for code in self.terms:
            jp[code] = np.asarray(self.joint_params.get(code, np.zeros(n)), dtype=float).reshape(n)
        extra = set(self.joint_params) - set(self.terms)
        if extra:
            raise IdentError(f"parameter set: joint terms {sorted(extra)} are not among the declared terms {list(self.terms)}")
        self.joint_params = jp

    @property
    def n(self) -> int:
        """Number of joints (= bodies)."""
        return len(self.joint_names)

    def vector(self) -> np.ndarray:
        """Full parameter vector (10 n + n len(terms),) in regressor column order."""
        cols = [self.inertial.reshape(-1)]
        if self.terms:
            cols.append(np.stack([self.joint_params[c] for c in self.terms], axis=1).reshape(-1))
        return np.concatenate(cols)

    def physical(self, tol: float = PHYSICAL_TOL) -> np.ndarray:
        """(n,) bool: each body's pseudo-inertia is positive semidefinite (smallest eigenvalue
        >= -tol times its largest)."""
        ev = np.linalg.eigvalsh(pseudo_inertia(self.inertial))
        return ev[:, 0] >= -tol * np.maximum(np.abs(ev[:, -1]), 1e-300)

    def check_robot(self, robot: Robot, where: str = "parameter set") -> "ParameterSet":
        """Return this set reordered to `robot`'s joint order; one clear error when it belongs to
        another robot (a joint or body missing on either side)."""
        missing = [j for j in robot.joint_names if j not in self.joint_names]
        extra = [j for j in self.joint_names if j not in robot.joint_names]
        if missing or extra:
            parts = []
            if missing:
                parts.append(f"joints {missing} of {robot.name} are missing")
            if extra:
                parts.append(f"joints {extra} are not identified joints of {robot.name}")
            raise DataError(f"{where}: does not belong to this robot model: {'; '.join(parts)}")
        order = [self.joint_names.index(j) for j in robot.joint_names]
        bodies = [self.body_names[i] for i in order]
        if bodies != list(robot.body_names):
            bad = [(j, b, rb) for j, b, rb in zip(robot.joint_names, bodies, robot.body_names) if b != rb]
            j, b, rb = bad[0]
            raise DataError(f"{where}: joint '{j}' moves link '{b}' in the file but '{rb}' in {robot.name}")
        if order == list(range(self.n)):
            return self
        return ParameterSet(
            robot_name=self.robot_name,
            joint_names=list(robot.joint_names),
            body_names=bodies,
            inertial=self.inertial[order],
            joint_params={c: v[order] for c, v in self.joint_params.items()},
            terms=self.terms,
            base=self.base,
            method=self.method,
            data=self.data,
            diagnostics=self.diagnostics,
        )

    def to_dict(self) -> dict:
        """The YAML-ready document (plain Python types) of format :data:`FORMAT`."""
        links = {}
        ok = self.physical()
        for i, (body, joint) in enumerate(zip(self.body_names, self.joint_names)):
            pi = self.inertial[i]
            entry = {"joint": joint, "mass": _f(pi[0])}
            if pi[0] > 0:
                _, c, I_c = from_vector(pi)
                entry["com"] = [_f(x) for x in c]
                entry["inertia_com"] = dict(zip(_SYM, (_f(x) for x in matrix_to_sym(I_c))))
            else:
                entry["first_moment"] = [_f(x) for x in pi[1:4]]
                entry["inertia_origin"] = dict(zip(_SYM, (_f(x) for x in pi[4:10])))
            entry["physical"] = bool(ok[i])
            links[body] = entry
        doc = {
            "format": FORMAT,
            "robot": self.robot_name,
            "joints": list(self.joint_names),
            "terms": list(self.terms),
            "links": links,
            "joint_terms": {j: {c: _f(self.joint_params[c][i]) for c in self.terms} for i, j in enumerate(self.joint_names)},
        }
        if self.base is not None:
            doc["base_parameters"] = [
                {"name": nm, "value": _f(v), "std": _f(s), "relation": rel}
                for nm, v, s, rel in zip(self.base.names, self.base.values, self.base.std, self.base.relations)
            ]
        for key in ("method", "data", "diagnostics"):
            val = getattr(self, key)
            if val:
                doc[key] = _plain(val)
        return doc


def _f(x) -> float | None:
    """A float for YAML; NaN becomes null (YAML's .nan is not portable)."""
    x = float(x)
    return None if math.isnan(x) else x


def _plain(obj):
    """Convert numpy scalars/arrays inside dicts and lists to plain Python for safe YAML."""
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _plain(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        return _f(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if obj is None or isinstance(obj, (str, int, bool)):
        return obj
    return str(obj)


def parameter_set_from_vector(robot: Robot, params, terms=(), **extra) -> ParameterSet:
    """A :class:`ParameterSet` for `robot` from a full parameter vector.

    Parameters
    ----------
    robot : the model (names and order).
    params : (10 n + n len(terms),) full vector in regressor column order, or (n, 10) inertial
        parameters alone when `terms` is empty.
    terms : joint-term codes carried by `params`.
    **extra : `base`, `method`, `data`, `diagnostics` passed to :class:`ParameterSet`.
    """
    codes = parse_terms(terms)
    p = np.asarray(params, dtype=float).reshape(-1)
    if p.size != robot.n_params(codes):
        raise IdentError(f"parameters: expected {robot.n_params(codes)} values for {robot.name} with terms {list(codes)}, got {p.size}")
    if not np.all(np.isfinite(p)):
        raise IdentError("parameters: non-finite value")
    n = robot.n
    jt = p[10 * n :].reshape(n, len(codes)) if codes else np.zeros((n, 0))
    return ParameterSet(
        robot_name=robot.name,
        joint_names=list(robot.joint_names),
        body_names=list(robot.body_names),
        inertial=p[: 10 * n].reshape(n, 10),
        joint_params={c: jt[:, k].copy() for k, c in enumerate(codes)},
        terms=codes,
        **extra,
    )


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
    for key in ("method", "data", "diagnostics"):
        val = doc.get(key)
        if val is not None and not isinstance(val, dict):
            raise DataError(f"{where}: '{key}' must be a mapping")
        extras[key] = val or {}
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


def _num(x, where: str) -> float:
    if isinstance(x, bool) or not isinstance(x, (int, float)):
        raise DataError(f"{where}: '{x}' is not a number")
    if not math.isfinite(float(x)):
        raise DataError(f"{where}: value is not finite")
    return float(x)


def _vec(x, size: int, where: str) -> np.ndarray:
    if not isinstance(x, list) or len(x) != size:
        raise DataError(f"{where}: expected a list of {size} numbers")
    return np.array([_num(v, f"{where}[{k}]") for k, v in enumerate(x)])


def _sym(x, where: str) -> np.ndarray:
    if not isinstance(x, dict) or set(x) != set(_SYM):
        raise DataError(f"{where}: expected the six entries {', '.join(_SYM)}")
    return np.array([_num(x[k], f"{where}.{k}") for k in _SYM])


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
    m = _num(entry["mass"], f"{w}.mass")
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


__all__ = [
    "FORMAT",
    "BaseTable",
    "ParameterSet",
    "parameter_set_from_vector",
    "parameter_set_from_dict",
    "save_parameters",
    "load_parameters",
]
