"""The robot model: a kinematic tree of identified joints, each moving one rigid body.

A :class:`Robot` is built by :func:`ident.arm.urdf.load_urdf` or :func:`ident.arm.dh.load_dh` (or
:func:`load_robot`, which picks by file extension). Bodies joined by fixed or locked joints are
merged into one rigid body before anything else sees them, so the model that dynamics and
identification work on has exactly one body per identified joint.

Joint ``i`` (0-based) connects body ``parent[i]`` (``-1`` is the fixed base) to body ``i``:
the joint frame sits at ``(R_fix[i], p_fix[i])`` in the parent body's frame, and the joint moves
about (revolute) or along (prismatic) the unit ``axis[i]`` expressed in the joint frame. The body
frame is the joint frame after the motion (the URDF child-link frame). Parents always come before
children (``parent[i] < i``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import IdentError, ModelError
from .spatial import PARAM_SUFFIXES

REVOLUTE = 0


PRISMATIC = 1


#: Per-joint terms the regressor can carry, by code: (name, unit of the coefficient). The column of
#: each is a function of the joint's velocity v (or acceleration): fv v, fc sign(v), fo 1, ia q'',
#: fcp [v > 0] and fcn -[v < 0] (direction-dependent Coulomb levels, both >= 0 for a dissipative
#: joint), and fl1..fl3 tanh(v / s_k) with the fixed velocity scales :data:`LOW_SPEED_SCALES`: the
#: low-speed friction shape, a linear basis whose mixed-sign coefficients follow a smooth
#: transition through zero speed or a Stribeck-like hump above the Coulomb level.
JOINT_TERMS = {
    "fv": ("viscous friction", "N m s/rad or N s/m"),
    "fc": ("Coulomb friction", "N m or N"),
    "fo": ("constant offset", "N m or N"),
    "ia": ("armature (reflected rotor inertia)", "kg m^2 or kg"),
    "fcp": ("Coulomb level, positive velocity", "N m or N"),
    "fcn": ("Coulomb level, negative velocity", "N m or N"),
    "fl1": ("low-speed friction shape, tanh(v / 0.005)", "N m or N"),
    "fl2": ("low-speed friction shape, tanh(v / 0.02)", "N m or N"),
    "fl3": ("low-speed friction shape, tanh(v / 0.08)", "N m or N"),
}

#: Velocity scales s_k of the low-speed shape terms fl1..fl3 (rad/s, or m/s for a prismatic joint):
#: spread over the range where joint friction leaves its breakaway level (Stribeck velocities of
#: geared joints are of the order of 0.01 rad/s; Armstrong-Helouvry et al. 1994 survey).
LOW_SPEED_SCALES = (0.005, 0.02, 0.08)

#: Terms whose column is a function of sign or shape of the velocity: their regressor columns are
#: the ones parallel filtering must smear like the torque, and the ones slow samples leave out.
DRY_FRICTION_TERMS = ("fc", "fcp", "fcn", "fl1", "fl2", "fl3")

#: Term groups accepted by name in a selection.
_TERM_GROUPS = {"lowspeed": ("fl1", "fl2", "fl3"), "fl": ("fl1", "fl2", "fl3"), "directional": ("fcp", "fcn")}

_TERM_ALIASES = {"viscous": "fv", "coulomb": "fc", "offset": "fo", "armature": "ia"}


def parse_terms(terms) -> tuple[str, ...]:
    """Normalize a joint-term selection to codes in canonical order, e.g. ``"fv,fc"`` -> ``("fv", "fc")``.

    Accepts an iterable or comma-separated string of codes (fv, fc, fo, ia, fcp, fcn, fl1, fl2,
    fl3), names (viscous, coulomb, offset, armature) or groups (``directional`` = fcp, fcn;
    ``lowspeed`` = fl1, fl2, fl3); ``"all"`` selects every term, ``None``/``""``/``"none"`` none.
    """
    if terms is None:
        return ()
    if isinstance(terms, str):
        terms = [t for t in terms.replace(" ", "").split(",") if t]
        if terms in (["none"],):
            return ()
        if terms == ["all"]:
            return tuple(JOINT_TERMS)
    codes = set()
    for t in terms:
        key = str(t).lower()
        if key in _TERM_GROUPS:
            codes.update(_TERM_GROUPS[key])
            continue
        code = _TERM_ALIASES.get(key, key)
        if code not in JOINT_TERMS:
            raise IdentError(f"unknown joint term '{t}': choose from {', '.join(JOINT_TERMS)} (or viscous, coulomb, offset, armature, directional, lowspeed, all)")
        codes.add(code)
    return tuple(c for c in JOINT_TERMS if c in codes)


@dataclass
class Frame:
    """Where a named frame (an original link) sits: on body `body` (-1 = base) at (R, p) in that body's frame."""

    body: int
    R: np.ndarray
    p: np.ndarray


@dataclass
class Robot:
    """A fixed-base kinematic tree with ``n`` identified joints and one rigid body per joint.

    Arrays: ``parent`` (n,) int; ``joint_type`` (n,) int (0 revolute, 1 prismatic);
    ``R_fix`` (n, 3, 3); ``p_fix`` (n, 3) m; ``axis`` (n, 3) unit; limits (n,) in rad, m, rad/s,
    m/s, N m or N (``inf`` when absent); ``prior`` (n, 10) inertial parameters of each merged body
    in its own frame (the description's values, used as the prior); ``gravity`` (3,) m/s^2 in the
    base frame.
    """

    name: str
    joint_names: list[str]
    body_names: list[str]
    parent: np.ndarray
    joint_type: np.ndarray
    R_fix: np.ndarray
    p_fix: np.ndarray
    axis: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    velocity_limit: np.ndarray
    effort_limit: np.ndarray
    prior: np.ndarray
    gravity: np.ndarray = field(default_factory=lambda: np.array([0.0, 0.0, -9.81]))
    continuous: np.ndarray | None = None
    base_name: str = "base"
    frames: dict[str, Frame] = field(default_factory=dict)
    merged: list[list[str]] = field(default_factory=list)
    locked: dict[str, float] = field(default_factory=dict)
    source: str = ""
    source_kind: str = ""

    def __post_init__(self) -> None:
        n = len(self.joint_names)
        self.parent = np.asarray(self.parent, dtype=np.int64).reshape(n)
        self.joint_type = np.asarray(self.joint_type, dtype=np.int64).reshape(n)
        self.R_fix = np.asarray(self.R_fix, dtype=float).reshape(n, 3, 3)
        self.p_fix = np.asarray(self.p_fix, dtype=float).reshape(n, 3)
        self.axis = np.asarray(self.axis, dtype=float).reshape(n, 3)
        for name in ("lower", "upper", "velocity_limit", "effort_limit"):
            setattr(self, name, np.asarray(getattr(self, name), dtype=float).reshape(n))
        self.prior = np.asarray(self.prior, dtype=float).reshape(n, 10)
        self.gravity = np.asarray(self.gravity, dtype=float).reshape(3)
        if self.continuous is None:
            self.continuous = np.zeros(n, dtype=bool)
        self.continuous = np.asarray(self.continuous, dtype=bool).reshape(n)
        if not self.merged:
            self.merged = [[b] for b in self.body_names]
        if np.any(self.parent >= np.arange(n)):
            raise ModelError(f"{self.name}: joints are not ordered parents-first")
        anc = np.zeros((n, n), dtype=bool)
        for k in range(n):
            j = k
            while j >= 0:
                anc[k, j] = True
                j = self.parent[j]
        self._ancestors = anc

    # -- sizes and names ------------------------------------------------------------------
    @property
    def n(self) -> int:
        """Number of identified joints (= bodies)."""
        return len(self.joint_names)

    @property
    def ancestors(self) -> np.ndarray:
        """(n, n) bool: ``ancestors[k, j]`` is true when joint j lies on the path from the base to body k (j = k included)."""
        return self._ancestors

    def inertial_names(self) -> list[str]:
        """Names of the 10 n inertial parameters, body by body: ``<body>.m``, ``<body>.mx``, ..."""
        return [f"{b}.{s}" for b in self.body_names for s in PARAM_SUFFIXES]

    def term_names(self, terms) -> list[str]:
        """Names of the per-joint columns for `terms`, joint by joint: ``<joint>.fv``, ``<joint>.fc``, ..."""
        codes = parse_terms(terms)
        return [f"{j}.{c}" for j in self.joint_names for c in codes]

    def param_names(self, terms=()) -> list[str]:
        """All regressor column names: inertial columns, then per-joint terms."""
        return self.inertial_names() + self.term_names(terms)

    def n_params(self, terms=()) -> int:
        """Number of regressor columns for `terms`: 10 n + n len(terms)."""
        return self.n * (10 + len(parse_terms(terms)))

    def joint_index(self, name: str) -> int:
        """Index of identified joint `name`; a clear error when there is none."""
        try:
            return self.joint_names.index(name)
        except ValueError:
            raise IdentError(f"{self.name}: no identified joint named '{name}' (joints: {', '.join(self.joint_names)})") from None

    def frame(self, name: str) -> Frame:
        """Placement of the named link frame (or body name) on its body."""
        if name in self.frames:
            return self.frames[name]
        raise IdentError(f"{self.name}: no link or frame named '{name}'")

    def prior_vector(self, terms=()) -> np.ndarray:
        """Prior full parameter vector (p,): the description's inertial values, zeros for joint terms."""
        return np.concatenate([self.prior.reshape(-1), np.zeros(self.n * len(parse_terms(terms)))])

    # -- argument checks shared by the dynamics entry points ----------------------------------
    def check_states(self, *arrays, names=("q", "dq", "ddq")) -> tuple[np.ndarray, ...]:
        """Validate joint arrays: each (N, n) or (n,) finite float; returns them as (N, n) float64."""
        out = []
        N = None
        for arr, nm in zip(arrays, names):
            a = np.asarray(arr, dtype=float)
            if a.ndim == 1:
                a = a[None, :]
            if a.ndim != 2 or a.shape[1] != self.n:
                raise IdentError(f"{nm}: expected shape (N, {self.n}) for the joints of {self.name}, got {np.shape(arr)}")
            if N is None:
                N = a.shape[0]
            elif a.shape[0] != N:
                raise IdentError(f"{nm}: has {a.shape[0]} samples, expected {N} like {names[0]}")
            if not np.all(np.isfinite(a)):
                bad = np.argwhere(~np.isfinite(a))[0]
                raise IdentError(f"{nm}: non-finite value at sample {bad[0]}, joint {self.joint_names[bad[1]]}")
            out.append(np.ascontiguousarray(a))
        return tuple(out)

    def check_inertial(self, inertial) -> np.ndarray:
        """Validate inertial parameters: None (use prior), (n, 10) or (10 n,) -> (n, 10) float64."""
        if inertial is None:
            return self.prior
        a = np.asarray(inertial, dtype=float)
        if a.size != 10 * self.n:
            raise IdentError(f"inertial parameters: expected {10 * self.n} values (10 per body of {self.name}), got {a.size}")
        if not np.all(np.isfinite(a)):
            raise IdentError("inertial parameters: non-finite value")
        return np.ascontiguousarray(a.reshape(self.n, 10))

    def describe(self) -> str:
        """One line: name, joint count and kinds."""
        kinds = ["prismatic" if t == PRISMATIC else "revolute" for t in self.joint_type]
        return f"{self.name}: {self.n} joints ({kinds.count('revolute')} revolute, {kinds.count('prismatic')} prismatic)"


def kernel_arrays(robot: Robot):
    """The contiguous arrays the compiled kernels take: parent, joint_type, R_fix, p_fix, axis."""
    return (
        np.ascontiguousarray(robot.parent),
        np.ascontiguousarray(robot.joint_type),
        np.ascontiguousarray(robot.R_fix),
        np.ascontiguousarray(robot.p_fix),
        np.ascontiguousarray(robot.axis),
    )
