"""A parameter set of an arm: per link mass, centre of mass and inertia, per joint friction and
armature, optionally the base parameters with their uncertainty, and the plain mapping the
parameter file stores (:mod:`ident.handover.paramfile`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import DataError, IdentError
from .model import Robot, parse_terms
from .spatial import from_vector, matrix_to_sym, pseudo_inertia

#: Format tag of the parameter file that stores a parameter set.
FORMAT = "ident-parameters/1"


SYM_KEYS = ("xx", "xy", "xz", "yy", "yz", "zz")


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
    context : how the model was made and must be used (see :func:`make_context`): ``description``
        (file name), ``locked`` {joint: position, rad or m}, ``gravity`` (3,) m/s^2 and
        ``conditioning`` (the log settings the fit used). Empty for files written before it existed.
    collision : optional collision-detection thresholds from a held-out check (see
        :mod:`ident.handover.collision`).
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
    context: dict = field(default_factory=dict)
    collision: dict = field(default_factory=dict)

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

    def vector(self, terms=None) -> np.ndarray:
        """Full parameter vector (10 n + n len(terms),) in regressor column order, for this set's
        terms or for the given ones (terms this set does not carry count as zero)."""
        terms = self.terms if terms is None else parse_terms(terms)
        cols = [self.inertial.reshape(-1)]
        if terms:
            zero = np.zeros(self.inertial.shape[0])
            cols.append(np.stack([self.joint_params.get(c, zero) for c in terms], axis=1).reshape(-1))
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
            context=self.context,
            collision=self.collision,
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
                entry["inertia_com"] = dict(zip(SYM_KEYS, (_f(x) for x in matrix_to_sym(I_c))))
            else:
                entry["first_moment"] = [_f(x) for x in pi[1:4]]
                entry["inertia_origin"] = dict(zip(SYM_KEYS, (_f(x) for x in pi[4:10])))
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
        for key in ("context", "method", "data", "diagnostics", "collision"):
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
    **extra : `base`, `method`, `data`, `diagnostics`, `context`, `collision` passed to :class:`ParameterSet`.
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


#: Conditioning settings that describe how a model's torques were compared (kept in the context);
#: the others (period, windows, trims, gaps) describe one log and are not carried over.
CONTEXT_CONDITIONING = ("cutoff", "filter_order", "derivative", "savgol_window", "logged_velocity",
                        "logged_acceleration", "decimate", "slow_velocity", "reversal_margin", "delay")


def make_context(robot: Robot, conditioning: dict | None = None) -> dict:
    """The context a parameter set carries: description file name, locked joints with their
    positions (rad or m), gravity (3,) m/s^2, and the conditioning settings in
    :data:`CONTEXT_CONDITIONING` taken from `conditioning` (e.g. ``Dataset.info["options"]`` with
    the resolved ``cutoff``). The joint selection and the terms are the file's ``joints`` and ``terms``.
    """
    from pathlib import Path

    ctx = {"description": Path(robot.source).name if robot.source else "",
           "locked": {j: float(v) for j, v in robot.locked.items()},
           "gravity": [float(g) for g in robot.gravity]}
    if conditioning:
        ctx["conditioning"] = {k: _plain(conditioning[k]) for k in CONTEXT_CONDITIONING if conditioning.get(k) is not None}
    return ctx


def description_parameters(robot: Robot, terms=(), joint_params: dict | None = None) -> ParameterSet:
    """The description's own values as a :class:`ParameterSet`: each body's inertial parameters as
    the description gives them (merged through fixed and locked joints), and per-joint terms from
    `joint_params` ({code: scalar or (n,)}, zero when absent). With its context filled in, it can
    be saved as a parameter file to edit as a prior or as the truth of a simulation.
    """
    codes = parse_terms(terms)
    jp = {}
    for code, val in (joint_params or {}).items():
        if code not in codes:
            raise IdentError(f"joint term '{code}' is given but not among the terms {list(codes)}")
        v = np.broadcast_to(np.asarray(val, dtype=float), (robot.n,)).copy()
        if not np.all(np.isfinite(v)):
            raise IdentError(f"joint term '{code}': non-finite value")
        jp[code] = v
    return ParameterSet(
        robot_name=robot.name,
        joint_names=list(robot.joint_names),
        body_names=list(robot.body_names),
        inertial=robot.prior.copy(),
        joint_params=jp,
        terms=codes,
        method={"name": "description", "note": "the robot description's own values, not identified"},
        context=make_context(robot),
    )
