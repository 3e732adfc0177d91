"""Excitation design: periodic Fourier trajectories that are safe to run and informative to log.

Trajectory family (finite Fourier series per joint, Swevers et al. 1997), with w = 2 pi / period::

    q_i(t) = q_i0 + sum_l [ a_il / (w l) sin(w l t) - b_il / (w l) cos(w l t) ]

so q', q'' are analytic and the motion is periodic (logs can be averaged over periods). Start and
end at rest at the home pose are three *linear* equations on each joint's coefficients
(q_i(0) = home_i, q_i'(0) = 0, q_i''(0) = 0), plus a fourth when the user fixes the offset q_i0.
We keep them exactly by optimizing in their null space, so every period starts and ends at home
with zero velocity and acceleration and no ramp is needed.

Constraints, checked on sampled time grids: joint positions (with a margin), velocities,
accelerations, torques of the prior model (the description's inertial values plus optional
friction/armature guesses), and keep-out regions (plane, vertical cylinder, box, sphere) for
chosen points on chosen links. Criteria, on the base regressor with the joint-term columns
(friction, armature) included: the condition number of the column-scaled stacked regressor
(Gautier and Khalil 1992) and the log determinant of the information matrix (D-optimality).

The optimizer is a penalty method minimized by L-BFGS-B from several seeded starts, with exact
gradients (the regressor's state sensitivities come from batched differences that are exact for
its linear and quadratic dependence on q'' and q'). Each candidate is made feasible by scaling its
motion about the particular solution (home at rest) until every constraint holds on a grid
`check_factor` times finer than the design grid and on the controller-rate samples, with a cushion
for excursions between samples. Augment mode adds the information of logs already recorded, so
the criterion is that of the combined data.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import scipy.linalg
import scipy.optimize
import yaml

from .base import base_parameters
from .blas import single_thread_blas
from .dynamics import frame_pose, inverse_dynamics, joint_term_torque
from .errors import DataError, IdentError, NumericalError
from .fileio import atomic_path, read_yaml, write_text
from .model import PRISMATIC, Robot, parse_terms
from .progress import Progress
from .regressor import regressor_into

#: Version tag of the coefficients file.
COEFF_FORMAT = "ident-fourier-trajectory/1"
CRITERIA = ("cond", "logdet")
REGION_KINDS = ("plane", "cylinder", "box", "sphere")
#: Largest |q(0) - home|, |q'(0)|, |q''(0)| (SI) a re-checked trajectory may have: "at rest" to round-off.
REST_TOLERANCE = 1e-9
#: Length scale that normalizes keep-out violations in the penalty (m).
_KEEPOUT_SCALE = 0.1
#: Relative cushion on torque limits and absolute cushion on keep-out distances (m) for excursions
#: between check samples (kinematic limits get an analytic cushion instead).
_TORQUE_CUSHION = 2e-3
_KEEPOUT_CUSHION = 1e-3
#: Condition number beyond which a design is refused: the base parameters would be numerically
#: unidentifiable (common practice regards values above a few hundred as already poor).
_COND_UNUSABLE = 1e6
#: Random directions screened for each optimizer start.
_SCREEN = 8
#: Penalty weights of the successive L-BFGS-B stages of each start.
_PENALTY_STAGES = (1e2, 1e4, 1e6)


# --------------------------------------------------------------------------------------------
# The trajectory family
# --------------------------------------------------------------------------------------------
def fourier_basis(t, period: float, harmonics: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Basis rows of q, q', q'' at times `t` (N,) s: three (N, 2L + 1) arrays.

    Coefficient layout per joint: ``[q0, a_1..a_L, b_1..b_L]``; ``q(t) = Phi(t) @ x``.
    """
    t = np.asarray(t, dtype=float).reshape(-1)
    w = 2.0 * np.pi / period
    wl = w * np.arange(1, harmonics + 1)
    arg = t[:, None] * wl[None, :]
    s, c = np.sin(arg), np.cos(arg)
    N = t.size
    one, zero = np.ones((N, 1)), np.zeros((N, 1))
    phi = np.hstack([one, s / wl, -c / wl])
    dphi = np.hstack([zero, c, s])
    ddphi = np.hstack([zero, -s * wl, c * wl])
    return phi, dphi, ddphi


@dataclass
class FourierTrajectory:
    """A periodic joint trajectory: per joint an offset and L sine/cosine coefficient pairs.

    Attributes
    ----------
    joint_names : (n,) joint names, in the robot's order.
    period : fundamental period 2 pi / w, s.
    offset : (n,) q_i0, rad or m.
    a, b : (n, L) coefficients of sin and -cos, rad/s or m/s (see the module docstring).
    home : (n,) pose at t = 0 and at every whole period, rad or m.
    """

    joint_names: list[str]
    period: float
    offset: np.ndarray
    a: np.ndarray
    b: np.ndarray
    home: np.ndarray

    @property
    def n(self) -> int:
        """Number of joints."""
        return len(self.joint_names)

    @property
    def harmonics(self) -> int:
        """Number of harmonics L."""
        return self.a.shape[1]

    @property
    def coefficients(self) -> np.ndarray:
        """(n, 2L + 1) coefficient rows ``[q0, a_1..a_L, b_1..b_L]``."""
        return np.hstack([self.offset[:, None], self.a, self.b])

    @classmethod
    def from_coefficients(cls, joint_names, period, X, home) -> "FourierTrajectory":
        """Build from (n, 2L + 1) coefficient rows (see :attr:`coefficients`)."""
        X = np.asarray(X, dtype=float)
        L = (X.shape[1] - 1) // 2
        return cls(list(joint_names), float(period), X[:, 0].copy(), X[:, 1 : 1 + L].copy(), X[:, 1 + L :].copy(), np.asarray(home, dtype=float).copy())

    def evaluate(self, t) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Positions, velocities and accelerations at times `t` (N,) s: three (N, n) arrays (SI)."""
        phi, dphi, ddphi = fourier_basis(t, self.period, self.harmonics)
        X = self.coefficients
        return phi @ X.T, dphi @ X.T, ddphi @ X.T

    def times(self, rate: float, periods: int = 1) -> np.ndarray:
        """Controller sample times k / rate, k = 0 .. periods * period * rate (inclusive), s."""
        ticks = _ticks(self.period, rate, "rate")
        return np.arange(periods * ticks + 1) / float(rate)

    def sample(self, rate: float, periods: int = 1) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Sample at the controller rate (Hz) over `periods` periods: t (N,), q, dq, ddq (N, n)."""
        t = self.times(rate, periods)
        return (t, *self.evaluate(t))

    def derivative_bounds(self) -> np.ndarray:
        """(4, n) upper bounds of |q'|, |q''|, |q'''|, |q''''| per joint over all time (analytic)."""
        w = 2.0 * np.pi / self.period * np.arange(1, self.harmonics + 1)
        amp = np.hypot(self.a, self.b)  # (n, L)
        return np.stack([amp @ w**k for k in range(4)])

    def to_dict(self) -> dict:
        """The coefficients-file mapping (format :data:`COEFF_FORMAT`)."""
        return {
            "format": COEFF_FORMAT,
            "model": "q(t) = offset + sum_l [sin_l/(w l) sin(w l t) - cos_l/(w l) cos(w l t)], w = 2 pi / period",
            "period": float(self.period),
            "harmonics": int(self.harmonics),
            "joints": {
                name: {
                    "home": float(self.home[i]),
                    "offset": float(self.offset[i]),
                    "sin": [float(v) for v in self.a[i]],
                    "cos": [float(v) for v in self.b[i]],
                }
                for i, name in enumerate(self.joint_names)
            },
        }

    @classmethod
    def from_dict(cls, d: dict, where: str = "coefficients") -> "FourierTrajectory":
        """Inverse of :meth:`to_dict`; errors name `where` and the offending key."""
        if not isinstance(d, dict) or d.get("format") != COEFF_FORMAT:
            raise IdentError(f"{where}: not an excitation coefficients file (expected format: {COEFF_FORMAT})")
        period = _positive(d.get("period"), f"{where}: period")
        joints = d.get("joints")
        if not isinstance(joints, dict) or not joints:
            raise IdentError(f"{where}: joints: expected a mapping joint -> coefficients")
        L = d.get("harmonics")
        if not isinstance(L, int) or L < 1:
            raise IdentError(f"{where}: harmonics: expected a positive integer, got {L!r}")
        names, rows, home = [], [], []
        for name, c in joints.items():
            key = f"{where}: joints.{name}"
            if not isinstance(c, dict):
                raise IdentError(f"{key}: expected a mapping with home, offset, sin, cos")
            sin = _floats(c.get("sin"), f"{key}.sin", L)
            cos = _floats(c.get("cos"), f"{key}.cos", L)
            off = _floats([c.get("offset")], f"{key}.offset", 1)
            hm = _floats([c.get("home")], f"{key}.home", 1)
            names.append(str(name))
            rows.append(np.concatenate([off, sin, cos]))
            home.append(hm[0])
        return cls.from_coefficients(names, period, np.array(rows), np.array(home))


def save_trajectory(path, traj: FourierTrajectory, extra: dict | None = None) -> None:
    """Write the coefficients file (YAML, atomic); `extra` adds informational keys (robot, rate)."""
    d = traj.to_dict()
    if extra:
        d = {**d, **{k: v for k, v in extra.items() if k not in d}}
    # PyYAML writes floats with repr(), so the file round-trips every coefficient bit for bit.
    write_text(path, yaml.safe_dump(d, sort_keys=False, default_flow_style=None, width=100))


def load_trajectory(path, robot: Robot | None = None) -> FourierTrajectory:
    """Read a coefficients file; with `robot`, its joints must be the robot's, in order."""
    p = Path(path)
    d = read_yaml(p, "coefficients file")
    traj = FourierTrajectory.from_dict(d, str(p))
    if robot is not None and traj.joint_names != robot.joint_names:
        raise IdentError(f"{p}: joints {', '.join(traj.joint_names)} do not match the robot's {', '.join(robot.joint_names)}")
    return traj


# --------------------------------------------------------------------------------------------
# Keep-out regions
# --------------------------------------------------------------------------------------------
@dataclass
class KeepoutPoint:
    """A point `point` (3,) m fixed in link `link`'s frame, watched by the keep-out regions."""

    name: str
    link: str
    point: np.ndarray


@dataclass
class Region:
    """A region the watched points must stay out of (or, for a plane, on the positive side of).

    kind ``plane``: ``point`` (3,), unit ``normal`` (3,); distance n.(x - point).
    kind ``cylinder``: vertical axis through ``center`` (x, y), ``radius``, height range ``z`` (2,).
    kind ``box``: axis-aligned, corners ``lower`` (3,) and ``upper`` (3,).
    kind ``sphere``: ``center`` (3,), ``radius``.
    Everything in the base frame, m. A point is fine when its signed distance is at least ``margin``.
    ``points``: names of the watched points this region applies to (None: all).
    """

    name: str
    kind: str
    margin: float
    params: dict
    points: list[str] | None = None

    def distance(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Signed distance (N,) m (positive outside) of points `x` (N, 3) m and its gradient (N, 3)."""
        P = self.params
        if self.kind == "plane":
            nrm = P["normal"]
            return (x - P["point"]) @ nrm, np.broadcast_to(nrm, x.shape).copy()
        if self.kind == "sphere":
            d = x - P["center"]
            r = np.linalg.norm(d, axis=1)
            g = d / np.maximum(r, 1e-12)[:, None]
            return r - P["radius"], g
        if self.kind == "box":
            c = 0.5 * (P["lower"] + P["upper"])
            h = 0.5 * (P["upper"] - P["lower"])
            u = x - c
            return _box_sdf(u, h)
        # vertical cylinder: a 2-D box SDF in (radial distance, height)
        rel = x[:, :2] - P["center"]
        rho = np.linalg.norm(rel, axis=1)
        zc = 0.5 * (P["z"][0] + P["z"][1])
        hz = 0.5 * (P["z"][1] - P["z"][0])
        u = np.stack([rho, x[:, 2] - zc], axis=1)
        d, g2 = _box_sdf(u, np.array([P["radius"], hz]), radial=True)
        er = rel / np.maximum(rho, 1e-12)[:, None]
        g = np.column_stack([g2[:, 0:1] * er, g2[:, 1]])
        return d, g


def _box_sdf(u: np.ndarray, h: np.ndarray, radial: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Signed distance of points u (N, k) from the centred box of half sizes h (k,), with gradient.

    With `radial`, u[:, 0] >= 0 is a radial distance (no mirror image on that axis).
    """
    au = np.abs(u)
    sgn = np.where(u >= 0, 1.0, -1.0)
    if radial:
        sgn[:, 0] = 1.0
    e = au - h
    outside = np.maximum(e, 0.0)
    d_out = np.linalg.norm(outside, axis=1)
    inner = e.max(axis=1)
    d = np.where(inner > 0, d_out, inner)
    g = np.where((inner > 0)[:, None], outside / np.maximum(d_out, 1e-12)[:, None], 0.0)
    k = e.argmax(axis=1)
    inside_rows = np.flatnonzero(inner <= 0)
    g[inside_rows, k[inside_rows]] = 1.0
    return d, g * sgn


# --------------------------------------------------------------------------------------------
# Configuration
# --------------------------------------------------------------------------------------------
@dataclass
class ExcitationConfig:
    """A validated design request for one robot (all arrays per joint, robot order, SI units).

    Build it with :func:`load_excitation_config` (YAML file) or :meth:`from_dict`; the file layout
    is documented in ``datasets_demo/examples/excite.yaml``.
    """

    period: float
    harmonics: int
    home: np.ndarray
    offset: np.ndarray | None
    rate: float
    periods: int
    terms: tuple[str, ...]
    criterion: str
    lower: np.ndarray
    upper: np.ndarray
    position_margin: np.ndarray
    velocity: np.ndarray
    acceleration: np.ndarray
    torque: np.ndarray
    torque_model: dict = field(default_factory=dict)
    torque_noise: np.ndarray | None = None
    points: list[KeepoutPoint] = field(default_factory=list)
    regions: list[Region] = field(default_factory=list)
    seed: int = 0
    starts: int = 6
    budget: float | None = 60.0
    max_iterations: int = 300
    design_samples: int = 120
    check_factor: int = 10
    source: str = "config"

    @classmethod
    def from_dict(cls, robot: Robot, d: dict, where: str = "config") -> "ExcitationConfig":
        """Validate a config mapping against `robot`; errors name `where` and the key."""
        if not isinstance(d, dict):
            raise IdentError(f"{where}: expected a mapping of settings")
        known = {"period", "harmonics", "home", "offset", "rate", "periods", "terms", "criterion", "limits", "torque_model", "torque_noise", "keepout", "optimizer"}
        for key in d:
            if key not in known:
                raise IdentError(f"{where}: unknown setting '{key}' (known: {', '.join(sorted(known))})")
        period = _positive(d.get("period"), f"{where}: period (s)")
        harmonics = d.get("harmonics")
        if not isinstance(harmonics, int) or isinstance(harmonics, bool) or harmonics < 2:
            raise IdentError(f"{where}: harmonics: expected an integer >= 2 (start and end at rest take 3 equations per joint), got {harmonics!r}")
        rate = _positive(d.get("rate"), f"{where}: rate (controller rate, Hz)")
        _ticks(period, rate, f"{where}: rate")
        periods = d.get("periods", 1)
        if not isinstance(periods, int) or isinstance(periods, bool) or periods < 1:
            raise IdentError(f"{where}: periods: expected a positive integer, got {periods!r}")
        if "home" not in d:
            raise IdentError(f"{where}: home: required (the pose the motion starts and ends at, rad or m per joint)")
        home = _per_joint(robot, d["home"], f"{where}: home")
        offset_spec = d.get("offset", "free")
        if offset_spec == "free":
            offset = None
        elif offset_spec == "home":
            offset = home.copy()
        else:
            offset = _per_joint(robot, offset_spec, f"{where}: offset")
            if harmonics < 3:
                raise IdentError(f"{where}: offset: a fixed offset needs harmonics >= 3")
        terms = parse_terms(d.get("terms", "fv,fc"))
        criterion = d.get("criterion", "cond")
        if criterion not in CRITERIA:
            raise IdentError(f"{where}: criterion: expected one of {', '.join(CRITERIA)}, got {criterion!r}")

        lim = d.get("limits") or {}
        if not isinstance(lim, dict):
            raise IdentError(f"{where}: limits: expected a mapping")
        _known_keys(lim, {"position_margin", "lower", "upper", "velocity", "velocity_scale", "acceleration", "torque", "torque_scale"}, f"{where}: limits")
        margin = _per_joint(robot, lim.get("position_margin", 0.05), f"{where}: limits.position_margin", nonneg=True)
        lower = robot.lower.copy() if "lower" not in lim else _per_joint(robot, lim["lower"], f"{where}: limits.lower", partial=robot.lower)
        upper = robot.upper.copy() if "upper" not in lim else _per_joint(robot, lim["upper"], f"{where}: limits.upper", partial=robot.upper)
        vscale = _fraction(lim.get("velocity_scale", 0.8), f"{where}: limits.velocity_scale")
        velocity = vscale * robot.velocity_limit
        if "velocity" in lim:
            velocity = _per_joint(robot, lim["velocity"], f"{where}: limits.velocity", positive=True, partial=velocity)
        if "acceleration" not in lim:
            raise IdentError(f"{where}: limits.acceleration: required (robot descriptions carry no acceleration limits; rad/s^2 or m/s^2 per joint)")
        acceleration = _per_joint(robot, lim["acceleration"], f"{where}: limits.acceleration", positive=True)
        tscale = _fraction(lim.get("torque_scale", 0.8), f"{where}: limits.torque_scale")
        torque = tscale * robot.effort_limit
        if "torque" in lim:
            torque = _per_joint(robot, lim["torque"], f"{where}: limits.torque", positive=True, partial=torque)
        for j, name in enumerate(robot.joint_names):
            if not np.isfinite(velocity[j]):
                raise IdentError(f"{where}: limits.velocity: joint '{name}' has no velocity limit in the description; set one")
            if lower[j] + margin[j] >= upper[j] - margin[j]:
                raise IdentError(f"{where}: limits.position_margin: joint '{name}' range [{lower[j]:.4g}, {upper[j]:.4g}] leaves no room with a margin of {margin[j]:.4g}")

        tm = d.get("torque_model") or {}
        if not isinstance(tm, dict):
            raise IdentError(f"{where}: torque_model: expected a mapping of fv, fc, ia per joint")
        torque_model = {}
        for code, vals in tm.items():
            if code not in ("fv", "fc", "fo", "ia"):
                raise IdentError(f"{where}: torque_model: unknown term '{code}' (expected fv, fc, fo, ia)")
            torque_model[code] = _per_joint(robot, vals, f"{where}: torque_model.{code}", partial=np.zeros(robot.n))
        noise = None
        if d.get("torque_noise") is not None:
            noise = _per_joint(robot, d["torque_noise"], f"{where}: torque_noise", positive=True)

        points, regions = _parse_keepout(robot, d.get("keepout"), f"{where}: keepout")

        opt = d.get("optimizer") or {}
        if not isinstance(opt, dict):
            raise IdentError(f"{where}: optimizer: expected a mapping")
        _known_keys(opt, {"seed", "starts", "budget", "max_iterations", "design_samples", "check_factor"}, f"{where}: optimizer")
        budget = opt.get("budget", 60.0)
        if budget is not None:
            budget = _positive(budget, f"{where}: optimizer.budget (s)")
        cfg = cls(
            period=period,
            harmonics=harmonics,
            home=home,
            offset=offset,
            rate=rate,
            periods=periods,
            terms=terms,
            criterion=criterion,
            lower=lower,
            upper=upper,
            position_margin=margin,
            velocity=velocity,
            acceleration=acceleration,
            torque=torque,
            torque_model=torque_model,
            torque_noise=noise,
            points=points,
            regions=regions,
            seed=_int(opt.get("seed", 0), f"{where}: optimizer.seed", 0),
            starts=_int(opt.get("starts", 6), f"{where}: optimizer.starts", 1),
            budget=budget,
            max_iterations=_int(opt.get("max_iterations", 300), f"{where}: optimizer.max_iterations", 1),
            design_samples=_int(opt.get("design_samples", max(96, 24 * harmonics)), f"{where}: optimizer.design_samples", 8),
            check_factor=_int(opt.get("check_factor", 10), f"{where}: optimizer.check_factor", 1),
            source=where,
        )
        if cfg.design_samples < 4 * harmonics + 1:
            raise IdentError(f"{where}: optimizer.design_samples: {cfg.design_samples} samples cannot resolve {harmonics} harmonics; use at least {4 * harmonics + 1}")
        return cfg

    def with_options(self, **changes) -> "ExcitationConfig":
        """A copy with some settings replaced (e.g. ``seed``, ``budget``, ``starts``, ``criterion``)."""
        import dataclasses

        if "criterion" in changes and changes["criterion"] not in CRITERIA:
            raise IdentError(f"criterion: expected one of {', '.join(CRITERIA)}, got {changes['criterion']!r}")
        return dataclasses.replace(self, **changes)


def load_excitation_config(path, robot: Robot) -> ExcitationConfig:
    """Read and validate an excitation config YAML for `robot`."""
    p = Path(path)
    d = read_yaml(p, "excitation config")
    return ExcitationConfig.from_dict(robot, d, str(p))


def _parse_keepout(robot: Robot, spec, where: str) -> tuple[list[KeepoutPoint], list[Region]]:
    if not spec:
        return [], []
    if not isinstance(spec, dict):
        raise IdentError(f"{where}: expected a mapping with points and regions")
    _known_keys(spec, {"points", "regions"}, where)
    points = []
    for k, item in enumerate(spec.get("points") or []):
        key = f"{where}.points[{k}]"
        if not isinstance(item, dict) or "link" not in item:
            raise IdentError(f"{key}: expected a mapping with link and point (m, in the link frame)")
        link = str(item["link"])
        robot.frame(link)  # names an unknown link clearly
        pt = _floats(item.get("point", [0.0, 0.0, 0.0]), f"{key}.point", 3)
        name = str(item.get("name", f"{link}@{k}"))
        if any(p.name == name for p in points):
            raise IdentError(f"{key}: duplicate point name '{name}'")
        points.append(KeepoutPoint(name, link, pt))
    regions = []
    names = {p.name for p in points}
    for k, item in enumerate(spec.get("regions") or []):
        key = f"{where}.regions[{k}]"
        if not isinstance(item, dict):
            raise IdentError(f"{key}: expected a mapping")
        kind = item.get("type")
        if kind not in REGION_KINDS:
            raise IdentError(f"{key}.type: expected one of {', '.join(REGION_KINDS)}, got {kind!r}")
        margin = _nonneg(item.get("margin", 0.0), f"{key}.margin (m)")
        params: dict = {}
        if kind == "plane":
            params["point"] = _floats(item.get("point"), f"{key}.point", 3)
            nrm = _floats(item.get("normal", [0.0, 0.0, 1.0]), f"{key}.normal", 3)
            if np.linalg.norm(nrm) < 1e-12:
                raise IdentError(f"{key}.normal: must be a non-zero vector")
            params["normal"] = nrm / np.linalg.norm(nrm)
        elif kind == "cylinder":
            params["center"] = _floats(item.get("center"), f"{key}.center (x, y)", 2)
            params["radius"] = _positive(item.get("radius"), f"{key}.radius (m)")
            z = _floats(item.get("z", [-1e3, 1e3]), f"{key}.z (zmin, zmax)", 2)
            if z[1] <= z[0]:
                raise IdentError(f"{key}.z: zmax must exceed zmin")
            params["z"] = z
        elif kind == "box":
            lo = _floats(item.get("lower"), f"{key}.lower", 3)
            hi = _floats(item.get("upper"), f"{key}.upper", 3)
            if np.any(hi <= lo):
                raise IdentError(f"{key}: upper must exceed lower on every axis")
            params["lower"], params["upper"] = lo, hi
        else:
            params["center"] = _floats(item.get("center"), f"{key}.center", 3)
            params["radius"] = _positive(item.get("radius"), f"{key}.radius (m)")
        applies = item.get("points")
        if applies is not None:
            applies = [str(a) for a in applies]
            for a in applies:
                if a not in names:
                    raise IdentError(f"{key}.points: no watched point named '{a}' (points: {', '.join(sorted(names)) or 'none'})")
        regions.append(Region(str(item.get("name", f"{kind}{k}")), kind, margin, params, applies))
    if regions and not points:
        raise IdentError(f"{where}.points: keep-out regions need at least one watched point on a link")
    return points, regions


# --------------------------------------------------------------------------------------------
# Constraints and criteria
# --------------------------------------------------------------------------------------------
@dataclass
class Margins:
    """Smallest margins to each limit over a set of samples (positive: inside the limit).

    position_lower/upper, velocity, acceleration, torque : (n,) in the joint's units, after the
    configured position margin (a value >= 0 means the margin is respected).
    keepout : {region name: (smallest distance beyond the region's margin (m), point name, time (s))}.
    peak_velocity, peak_acceleration, peak_torque : (n,) largest magnitudes.
    """

    position_lower: np.ndarray
    position_upper: np.ndarray
    velocity: np.ndarray
    acceleration: np.ndarray
    torque: np.ndarray
    keepout: dict
    peak_velocity: np.ndarray
    peak_acceleration: np.ndarray
    peak_torque: np.ndarray

    def violations(self, joint_names: list[str], units: list[str] | None = None) -> list[str]:
        """Readable list of violated constraints (empty when every constraint holds)."""
        out = []
        for label, arr in (("position (lower)", self.position_lower), ("position (upper)", self.position_upper), ("velocity", self.velocity), ("acceleration", self.acceleration), ("torque", self.torque)):
            for j in np.flatnonzero(arr < 0):
                out.append(f"{label} limit of joint '{joint_names[j]}' exceeded by {-arr[j]:.4g}")
        for name, (dist, pt, t) in self.keepout.items():
            if dist < 0:
                out.append(f"point '{pt}' enters keep-out region '{name}' (by {-dist:.4g} m beyond its margin at t = {t:.3f} s)")
        return out


def prior_torque(robot: Robot, cfg: ExcitationConfig, q, dq, ddq, Y=None) -> np.ndarray:
    """Torque (N, n) of the prior model: description inertial values plus ``cfg.torque_model``.

    `Y` (N, n, 10 n) is an inertial regressor already computed at these states (saves a pass).
    """
    if Y is None:
        return inverse_dynamics(robot, q, dq, ddq, joint_params=cfg.torque_model or None)
    tau = Y @ robot.prior.reshape(-1)
    if cfg.torque_model:
        tau += joint_term_torque(robot, dq, ddq, cfg.torque_model)
    return tau


def keepout_distances(robot: Robot, cfg: ExcitationConfig, q) -> list[tuple[Region, KeepoutPoint, np.ndarray]]:
    """Signed distances beyond each region's margin, per (region, watched point): list of (N,) m."""
    out = []
    if not cfg.regions:
        return out
    pos = {p.name: frame_pose(robot, q, p.link, p.point)[1] for p in cfg.points}
    for reg in cfg.regions:
        for pt in cfg.points:
            if reg.points is None or pt.name in reg.points:
                d, _ = reg.distance(pos[pt.name])
                out.append((reg, pt, d - reg.margin))
    return out


def check_trajectory(robot: Robot, cfg: ExcitationConfig, traj: FourierTrajectory, t, cushion: bool = True) -> Margins:
    """Margins of `traj` to every constraint of `cfg` at times `t` (N,) s.

    With `cushion`, kinematic margins are reduced by an analytic bound on how far the motion can
    go beyond its sampled extremes between samples (|f''| dt^2 / 8 with the series' derivative
    bounds), torque margins by a relative 0.2 % and keep-out margins by 1 mm.
    """
    t = np.asarray(t, dtype=float)
    q, dq, ddq = traj.evaluate(t)
    tau = prior_torque(robot, cfg, q, dq, ddq)
    dt = float(np.max(np.diff(np.sort(t)))) if t.size > 1 else 0.0
    bounds = traj.derivative_bounds()
    lo = cfg.lower + cfg.position_margin
    hi = cfg.upper - cfg.position_margin
    pad = (dt**2 / 8.0) * bounds if cushion else np.zeros_like(bounds)  # rows: for q, q', q''
    with np.errstate(invalid="ignore"):
        m_lo = np.where(np.isfinite(lo), q.min(axis=0) - lo - pad[1], np.inf)
        m_hi = np.where(np.isfinite(hi), hi - q.max(axis=0) - pad[1], np.inf)
    m_v = cfg.velocity - np.abs(dq).max(axis=0) - pad[2]
    m_a = cfg.acceleration - np.abs(ddq).max(axis=0) - pad[3]
    tlim = cfg.torque * (1.0 - (_TORQUE_CUSHION if cushion else 0.0))
    m_t = np.where(np.isfinite(cfg.torque), tlim - np.abs(tau).max(axis=0), np.inf)
    ko = {}
    for reg, pt, d in keepout_distances(robot, cfg, q):
        k = int(np.argmin(d))
        val = float(d[k]) - (_KEEPOUT_CUSHION if cushion else 0.0)
        if reg.name not in ko or val < ko[reg.name][0]:
            ko[reg.name] = (val, pt.name, float(t[k]))
    return Margins(m_lo, m_hi, m_v, m_a, m_t, ko, np.abs(dq).max(axis=0), np.abs(ddq).max(axis=0), np.abs(tau).max(axis=0))


def _feasible(m: Margins) -> bool:
    arrs = (m.position_lower, m.position_upper, m.velocity, m.acceleration, m.torque)
    return all(np.all(a >= 0) for a in arrs) and all(v[0] >= 0 for v in m.keepout.values())


def information_matrix(robot: Robot, q, dq, ddq, terms, weights=None, base=None) -> np.ndarray:
    """Information matrix A = sum_k Y_b,k^T W^2 Y_b,k (b, b) of the base regressor over N samples.

    `weights` (n,) scales each joint's rows (1 / torque noise); `base` is the
    :class:`ident.base.BaseParameters` (default: computed for `robot`, `terms`).
    """
    from .regressor import iter_regressor

    bp = base if base is not None else base_parameters(robot, terms)
    w = np.ones(robot.n) if weights is None else np.asarray(weights, dtype=float)
    A = np.zeros((bp.n_base, bp.n_base))
    for _, Y in iter_regressor(robot, q, dq, ddq, bp.terms):
        Wb = bp.columns(Y) * w[None, :, None]
        Wb = Wb.reshape(-1, bp.n_base)
        A += Wb.T @ Wb
    return A


def criteria_from_information(A: np.ndarray) -> dict:
    """Both criteria of an information matrix A (b, b).

    ``cond``: condition number of the column-scaled stacked base regressor, sqrt of the eigenvalue
    ratio of D A D with D = diag(A)^-1/2 (inf when rank deficient). ``logdet``: log det A
    (-inf when singular).
    """
    d = np.sqrt(np.clip(np.diag(A), 0, None))
    if np.any(d <= 0):
        return {"cond": math.inf, "logdet": -math.inf}
    C = A / d[:, None] / d[None, :]
    lam = np.linalg.eigvalsh(0.5 * (C + C.T))
    cond = math.sqrt(lam[-1] / lam[0]) if lam[0] > lam[-1] * 1e-15 else math.inf
    sign, logdet = np.linalg.slogdet(A)
    return {"cond": cond, "logdet": float(logdet) if sign > 0 else -math.inf}


def _criterion_grad(A: np.ndarray, kind: str) -> tuple[float, np.ndarray]:
    """Minimized criterion f(A) and its gradient dF/dA (b, b) (symmetric).

    cond: f = log cond = 0.5 (log lam_max - log lam_min) of C = D A D, D = diag(A)^-1/2.
    logdet: f = -log det(A) / b (mean log eigenvalue, so its scale matches the penalties).
    """
    b = A.shape[0]
    if kind == "logdet":
        try:
            c, low = scipy.linalg.cho_factor(A)
        except np.linalg.LinAlgError:
            return math.inf, np.zeros_like(A)
        logdet = 2.0 * np.sum(np.log(np.diag(c)))
        Ainv = scipy.linalg.cho_solve((c, low), np.eye(b))
        return -logdet / b, -Ainv / b
    dg = np.diag(A)
    if np.any(dg <= 0):
        return math.inf, np.zeros_like(A)
    Dv = dg**-0.5
    C = A * Dv[:, None] * Dv[None, :]
    lam, V = np.linalg.eigh(0.5 * (C + C.T))
    if lam[0] <= 0:
        return math.inf, np.zeros_like(A)
    f = 0.5 * (math.log(lam[-1]) - math.log(lam[0]))
    H = 0.5 * (np.outer(V[:, -1], V[:, -1]) / lam[-1] - np.outer(V[:, 0], V[:, 0]) / lam[0])
    # dC = dD A D + D dA D + D A dD with dD_jj = -0.5 A_jj^-3/2 dA_jj
    G = Dv[:, None] * H * Dv[None, :]
    corr = (A * Dv[None, :] * H).sum(axis=1) * dg**-1.5  # (A D H)_jj A_jj^-3/2
    G[np.diag_indices(b)] -= corr
    return f, G


# --------------------------------------------------------------------------------------------
# The design problem
# --------------------------------------------------------------------------------------------
class _BudgetExhausted(Exception):
    pass


class _Problem:
    """Penalized design criterion over the null-space coordinates z (n, k) of the rest equations."""

    def __init__(self, robot: Robot, cfg: ExcitationConfig, prior_info: np.ndarray | None):
        self.robot, self.cfg = robot, cfg
        n, L = robot.n, cfg.harmonics
        self.m = 2 * L + 1
        self.bp = base_parameters(robot, cfg.terms)
        # rest equations at t = 0: rows of Phi(0), dPhi(0), ddPhi(0) (and the offset row)
        phi0, dphi0, ddphi0 = fourier_basis([0.0], cfg.period, L)
        E = [phi0[0], dphi0[0], ddphi0[0]]
        if cfg.offset is not None:
            E.append(np.eye(self.m)[0])
        E = np.array(E)
        _, s, Vt = np.linalg.svd(E)
        self.Z = Vt[len(E) :].T  # (m, k) orthonormal null space
        self.k = self.Z.shape[1]
        self.Xp = np.zeros((n, self.m))
        # particular solution: the offset (home when free) plus the smallest harmonics that meet
        # the rest equations; with a free offset that is home at rest, so scaling z to 0 is safe
        for i in range(n):
            x0 = cfg.home[i] if cfg.offset is None else cfg.offset[i]
            rhs = np.array([cfg.home[i], 0.0, 0.0] + ([x0] if cfg.offset is not None else []))
            self.Xp[i, 0] = x0
            self.Xp[i, 1:] = np.linalg.lstsq(E[:, 1:], rhs - E[:, 0] * x0, rcond=None)[0]
        N = cfg.design_samples
        self.t = np.arange(N) * (cfg.period / N)
        self.Phi = fourier_basis(self.t, cfg.period, L)
        self.tcheck = np.arange(N * cfg.check_factor) * (cfg.period / (N * cfg.check_factor))
        self.tctrl = np.arange(_ticks(cfg.period, cfg.rate, "rate") + 1) / cfg.rate
        self.w_row = np.ones(n) if cfg.torque_noise is None else 1.0 / cfg.torque_noise
        # each design sample stands for this many logged samples of the new trajectory
        self.factor = cfg.rate * cfg.period * cfg.periods / N
        self.A0 = np.zeros((self.bp.n_base, self.bp.n_base)) if prior_info is None else prior_info
        p_in = 10 * n
        ind = self.bp.independent
        self.inert_cols = ind[ind < p_in]
        self.inert_pos = np.flatnonzero(ind < p_in)
        nt = len(cfg.terms)
        self.term_cols = []  # (position in base, joint, code)
        for pos in np.flatnonzero(ind >= p_in):
            c = ind[pos] - p_in
            self.term_cols.append((pos, c // nt, cfg.terms[c % nt]))
        self.prior_flat = robot.prior.reshape(-1)
        self.buf = np.empty(((3 * n + 1) * N, n, p_in))
        self.v_smooth = 0.01 * cfg.velocity
        self.mu = 1.0
        self.evals = 0
        self.deadline = math.inf
        self.eval_cap = math.inf

    # -- coefficient maps --------------------------------------------------------------------
    def coeffs(self, z: np.ndarray, s: float = 1.0) -> np.ndarray:
        return self.Xp + s * (z.reshape(self.robot.n, self.k) @ self.Z.T)

    def trajectory(self, z: np.ndarray, s: float = 1.0) -> FourierTrajectory:
        return FourierTrajectory.from_coefficients(self.robot.joint_names, self.cfg.period, self.coeffs(z, s), self.cfg.home)

    # -- criterion ---------------------------------------------------------------------------
    def base_rows(self, q, dq, ddq, Yin, smooth: bool = False) -> np.ndarray:
        """Base regressor (N, n, b) from the inertial regressor and analytic joint-term columns.

        With `smooth`, the Coulomb column is tanh(q' / v_s) instead of sign(q'), so the
        optimizer's objective is differentiable (v_s: 1 % of each joint's velocity limit).
        """
        N, n = q.shape
        Yb = np.zeros((N, n, self.bp.n_base))
        Yb[:, :, self.inert_pos] = Yin[:, :, self.inert_cols]
        for pos, j, code in self.term_cols:
            if code == "fc":
                Yb[:, j, pos] = np.tanh(dq[:, j] / self.v_smooth[j]) if smooth else np.sign(dq[:, j])
            else:
                Yb[:, j, pos] = {"fv": dq[:, j], "fo": 1.0, "ia": ddq[:, j]}[code]
        return Yb

    def information(self, Yb) -> np.ndarray:
        Wb = (Yb * self.w_row[None, :, None]).reshape(-1, Yb.shape[2])
        return self.A0 + self.factor * (Wb.T @ Wb)

    def criterion(self, X: np.ndarray) -> dict:
        """Both criteria of coefficient rows X on the design grid (combined with prior data)."""
        phi, dphi, ddphi = self.Phi
        q, dq, ddq = phi @ X.T, dphi @ X.T, ddphi @ X.T
        Yin = np.empty((q.shape[0], self.robot.n, 10 * self.robot.n))
        regressor_into(self.robot, np.ascontiguousarray(q), np.ascontiguousarray(dq), np.ascontiguousarray(ddq), Yin, ())
        return criteria_from_information(self.information(self.base_rows(q, dq, ddq, Yin)))

    # -- penalized objective with gradient -----------------------------------------------------
    def objective(self, zflat: np.ndarray) -> tuple[float, np.ndarray]:
        if time.monotonic() > self.deadline or self.evals >= self.eval_cap:
            raise _BudgetExhausted
        self.evals += 1
        robot, cfg = self.robot, self.cfg
        n, N = robot.n, self.t.size
        X = self.coeffs(zflat)
        phi, dphi, ddphi = self.Phi
        q, dq, ddq = phi @ X.T, dphi @ X.T, ddphi @ X.T
        # batched states: base, q + h e_i, dq + h e_i, ddq + e_i (forward differences; exact in
        # q'' where the regressor is linear, second order in q' where it is quadratic)
        hq, hd = 1e-7, 1e-6
        Q = np.empty((3 * n + 1, N, n))
        DQ = np.empty_like(Q)
        DDQ = np.empty_like(Q)
        Q[:], DQ[:], DDQ[:] = q, dq, ddq
        for i in range(n):
            Q[1 + i, :, i] += hq
            DQ[1 + n + i, :, i] += hd
            DDQ[1 + 2 * n + i, :, i] += 1.0
        regressor_into(robot, Q.reshape(-1, n), DQ.reshape(-1, n), DDQ.reshape(-1, n), self.buf, ())
        Yall = self.buf.reshape(3 * n + 1, N, n, 10 * n)
        Yin = Yall[0]
        Yb = self.base_rows(q, dq, ddq, Yin, smooth=True)
        A = self.information(Yb)
        f, GA = _criterion_grad(A, cfg.criterion)
        if not np.isfinite(f):
            f, GA = 50.0, np.zeros_like(A)  # rank-deficient point: flat high value, penalties still steer
        GY = 2.0 * self.factor * (self.w_row**2)[None, :, None] * (Yb @ GA)  # (N, n, b)
        gq = np.zeros((N, n))
        gdq = np.zeros((N, n))
        gddq = np.zeros((N, n))
        for pos, j, code in self.term_cols:
            if code == "fv":
                gdq[:, j] += GY[:, j, pos]
            elif code == "fc":
                gdq[:, j] += GY[:, j, pos] * (1.0 - Yb[:, j, pos] ** 2) / self.v_smooth[j]
            elif code == "ia":
                gddq[:, j] += GY[:, j, pos]
        pen = 0.0
        mu = self.mu
        # kinematic limits (normalized violations, mean over the grid)
        lo = cfg.lower + cfg.position_margin
        hi = cfg.upper - cfg.position_margin
        fin = np.isfinite(lo) & np.isfinite(hi)
        if np.any(fin):
            v_hi = np.where(fin, np.maximum(q - np.where(fin, hi, 0.0), 0.0), 0.0)
            v_lo = np.where(fin, np.maximum(np.where(fin, lo, 0.0) - q, 0.0), 0.0)
            pen += mu * (np.sum(v_hi**2) + np.sum(v_lo**2)) / N
            gq += mu * 2.0 * (v_hi - v_lo) / N
        for arr, lim, g in ((dq, cfg.velocity, gdq), (ddq, cfg.acceleration, gddq)):
            v = np.maximum(np.abs(arr) / lim - 1.0, 0.0)
            pen += mu * np.sum(v**2) / N
            g += mu * 2.0 * v * np.sign(arr) / lim / N
        # torque of the prior model
        tau = prior_torque(robot, cfg, q, dq, ddq, Yin)
        tfin = np.isfinite(cfg.torque)
        Gtau = np.zeros((N, n))
        if np.any(tfin):
            tl = np.where(tfin, cfg.torque, 1.0)
            v = np.where(tfin, np.maximum(np.abs(tau) / tl - 1.0, 0.0), 0.0)
            pen += mu * np.sum(v**2) / N
            Gtau = mu * 2.0 * v * np.sign(tau) / tl / N
            tm = cfg.torque_model
            if "fv" in tm:
                gdq += Gtau * tm["fv"]
            if "ia" in tm:
                gddq += Gtau * tm["ia"]
        # keep-out regions
        if cfg.regions:
            for reg, pt, d, grad_x, J in self._keepout_terms(Q[: n + 1], hq):
                v = np.maximum(-d / _KEEPOUT_SCALE, 0.0)
                pen += mu * np.sum(v**2) / N
                gx = -mu * 2.0 * v[:, None] * grad_x / _KEEPOUT_SCALE / N  # (N, 3)
                gq += np.einsum("nk,nki->ni", gx, J)
        # chain through the regressor: gradient on the full inertial regressor, contracted
        Gfull = np.zeros((N, n, 10 * n))
        Gfull[:, :, self.inert_cols] = GY[:, :, self.inert_pos]
        Gfull += Gtau[:, :, None] * self.prior_flat[None, None, :]
        s = np.einsum("knrc,nrc->kn", Yall, Gfull)  # (3n + 1, N)
        gq += ((s[1 : 1 + n] - s[0]) / hq).T
        gdq += ((s[1 + n : 1 + 2 * n] - s[0]) / hd).T
        gddq += (s[1 + 2 * n : 1 + 3 * n] - s[0]).T
        GX = gq.T @ phi + gdq.T @ dphi + gddq.T @ ddphi  # (n, m)
        return f + pen, (GX @ self.Z).reshape(-1)

    def _keepout_terms(self, Qpert: np.ndarray, hq: float):
        """Per (region, point): distance beyond the margin (N,), its gradient in x (N, 3) and the
        point's position Jacobian (N, 3, n), by forward differences over the states `Qpert`
        (n + 1, N, n) = [q, q + hq e_1, ...]."""
        n1, N, n = Qpert.shape
        flat = Qpert.reshape(-1, n)
        cache = {}
        for reg in self.cfg.regions:
            for pt in self.cfg.points:
                if reg.points is not None and pt.name not in reg.points:
                    continue
                if pt.name not in cache:
                    x = frame_pose(self.robot, flat, pt.link, pt.point)[1].reshape(n1, N, 3)
                    cache[pt.name] = (x[0], ((x[1:] - x[0]) / hq).transpose(1, 2, 0))
                x, J = cache[pt.name]
                d, g = reg.distance(x)
                yield reg, pt, d - reg.margin, g, J

    # -- feasibility by scaling ------------------------------------------------------------------
    def margins(self, z, s, times, cushion=True) -> Margins:
        return check_trajectory(self.robot, self.cfg, self.trajectory(z, s), times, cushion)

    def repair(self, z: np.ndarray, s_max: float = 1.0, tol: float = 1e-3) -> tuple[float, Margins]:
        """Largest scale s in [0, s_max] (to relative `tol`) with every constraint met on the check
        grid and the controller samples; returns (s, margins there).

        s = 0 is the particular solution (home at rest for a free offset), feasible by the checks
        of :func:`_check_home`; a fixed offset whose particular solution fails raises IdentError.
        """
        fine = np.concatenate([self.tcheck, self.tctrl])
        m0 = self.margins(z, 0.0, fine)
        if not _feasible(m0):
            what = "the fixed offset" if self.cfg.offset is not None else "home at rest"
            raise IdentError(f"{self.cfg.source}: {what} already violates: {'; '.join(m0.violations(self.robot.joint_names))}")
        s_hi = self._kinematic_scale(z, s_max)
        if not s_hi > 0:
            return 0.0, m0
        m = self.margins(z, s_hi, fine)
        if _feasible(m):
            return s_hi, m

        def bisect(lo, hi, times):
            while hi - lo > tol * hi:
                mid = 0.5 * (lo + hi)
                if _feasible(self.margins(z, mid, times)):
                    lo = mid
                else:
                    hi = mid
            return lo

        # the design grid is cheap: bracket there, then settle on the fine grids
        s = bisect(0.0, s_hi, self.t)
        m = self.margins(z, s, fine)
        if not _feasible(m):
            s = bisect(0.0, s, fine)
            m = self.margins(z, s, fine)
        return s, m

    def _kinematic_scale(self, z, s_max):
        """Largest s <= s_max for which the kinematic limits hold on the check grid (linear in s)."""
        cfg = self.cfg
        phi, dphi, ddphi = fourier_basis(self.tcheck, cfg.period, cfg.harmonics)
        D = z.reshape(self.robot.n, self.k) @ self.Z.T
        s = s_max
        lo = cfg.lower + cfg.position_margin
        hi = cfg.upper - cfg.position_margin
        for B, bl, bh in ((phi, lo, hi), (dphi, -cfg.velocity, cfg.velocity), (ddphi, -cfg.acceleration, cfg.acceleration)):
            p = B @ self.Xp.T
            d = B @ D.T
            with np.errstate(divide="ignore", invalid="ignore"):
                up = np.where(d > 0, (bh - p) / d, np.inf)
                dn = np.where(d < 0, (bl - p) / d, np.inf)
            s = min(s, float(np.nanmin(up)), float(np.nanmin(dn)))
        return max(s, 0.0)

    def screened_start(self, rng: np.random.Generator, candidates: int = _SCREEN) -> np.ndarray:
        """The best of `candidates` random directions, each scaled to its kinematic limits (cheap:
        no torque or keep-out check), by the design criterion."""
        best, best_val = None, math.inf
        for _ in range(candidates):
            z = self.random_z(rng)
            X = self.coeffs(z, self._kinematic_scale(z, math.inf))
            c = self.criterion(X)
            val = c["cond"] if self.cfg.criterion == "cond" else -c["logdet"]
            if best is None or val < best_val:
                best, best_val = z, val
        return best

    def random_z(self, rng: np.random.Generator) -> np.ndarray:
        """Random null-space coordinates; harmonic l weighted 1/l so low harmonics dominate."""
        L = self.cfg.harmonics
        wgt = np.concatenate([[1.0], 1.0 / np.arange(1, L + 1), 1.0 / np.arange(1, L + 1)])
        x = rng.standard_normal((self.robot.n, self.m)) * wgt
        # scale by the velocity limit so every joint moves comparably
        x *= self.cfg.velocity[:, None]
        return (x @ self.Z).reshape(-1)


# --------------------------------------------------------------------------------------------
# Design
# --------------------------------------------------------------------------------------------
@dataclass
class ExcitationResult:
    """A designed excitation and its report.

    Attributes
    ----------
    trajectory : the :class:`FourierTrajectory`.
    config : the :class:`ExcitationConfig` it satisfies.
    criteria : {"cond", "logdet"} on the controller-rate samples of the written trajectory
        (combined with the earlier logs in augment mode).
    criteria_new : the same for the new trajectory alone.
    criteria_prior : the same for the earlier logs alone (augment mode), else None.
    margins : :class:`Margins` on the check grid and the controller samples.
    starts : per-start records (initial and final criterion, scale, evaluations, stop reason).
    base_names : names of the base parameters the criteria are built on.
    elapsed : optimization wall time, s.
    budget_hit : whether the time budget stopped the optimizer (then results depend on speed).
    """

    robot_name: str
    joint_names: list[str]
    trajectory: FourierTrajectory
    config: ExcitationConfig
    criteria: dict
    criteria_new: dict
    criteria_prior: dict | None
    margins: Margins
    starts: list[dict]
    base_names: list[str]
    elapsed: float
    budget_hit: bool
    joint_units: list[str] = field(default_factory=list)

    def sample(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Controller-rate samples t (N,), q, dq, ddq (N, n) over the configured periods."""
        return self.trajectory.sample(self.config.rate, self.config.periods)


def _check_home(robot: Robot, cfg: ExcitationConfig) -> None:
    """Infeasible requests fail here: home outside the limits, in a keep-out region, or overloaded."""
    where = cfg.source
    lo = cfg.lower + cfg.position_margin
    hi = cfg.upper - cfg.position_margin
    for j, name in enumerate(robot.joint_names):
        if not lo[j] <= cfg.home[j] <= hi[j]:
            raise IdentError(f"{where}: home: joint '{name}' at {cfg.home[j]:.4g} is outside its limits [{lo[j]:.4g}, {hi[j]:.4g}] (margin included)")
        if cfg.offset is not None and not lo[j] <= cfg.offset[j] <= hi[j]:
            raise IdentError(f"{where}: offset: joint '{name}' at {cfg.offset[j]:.4g} is outside its limits [{lo[j]:.4g}, {hi[j]:.4g}] (margin included)")
    h = cfg.home[None, :]
    z = np.zeros_like(h)
    tau = prior_torque(robot, cfg, h, z, z)[0]
    for j, name in enumerate(robot.joint_names):
        if np.isfinite(cfg.torque[j]) and abs(tau[j]) > cfg.torque[j]:
            raise IdentError(f"{where}: home: holding joint '{name}' takes {abs(tau[j]):.4g} of the prior model, above its torque limit {cfg.torque[j]:.4g}")
    for reg, pt, d in keepout_distances(robot, cfg, h):
        if d[0] < 0:
            raise IdentError(f"{where}: keepout: at home, point '{pt.name}' on link '{pt.link}' is {-d[0]:.4g} m inside keep-out region '{reg.name}' (margin included)")


def _prior_information(robot: Robot, cfg: ExcitationConfig, logs) -> np.ndarray | None:
    """Information matrix of logs already recorded: a Dataset-like (.q .dq .ddq) or a (q, dq, ddq) tuple."""
    if logs is None:
        return None
    if hasattr(logs, "q") and hasattr(logs, "dq") and hasattr(logs, "ddq"):
        states = (logs.q, logs.dq, logs.ddq)
    elif isinstance(logs, (tuple, list)) and len(logs) == 3:
        states = tuple(logs)
    else:
        raise DataError("augment logs: expected a dataset with q, dq, ddq or a (q, dq, ddq) tuple of (N, n) arrays")
    for arr, nm in zip(states, ("q", "dq", "ddq")):
        if arr is None:
            raise DataError(f"augment logs: {nm} is missing (velocities and accelerations are needed for the regressor)")
    q, dq, ddq = robot.check_states(*states)
    w = None if cfg.torque_noise is None else 1.0 / cfg.torque_noise
    return information_matrix(robot, q, dq, ddq, cfg.terms, w)


def design_excitation(robot: Robot, config: ExcitationConfig | dict, logs=None, progress: bool = False, max_evaluations: int | None = None) -> ExcitationResult:
    """Design an excitation trajectory for `robot` (see the module docstring for the method).

    Parameters
    ----------
    robot : the model; its prior (description inertial values) predicts the torques.
    config : an :class:`ExcitationConfig` or a config mapping (validated here).
    logs : augment mode: data already recorded (a dataset with ``.q .dq .ddq`` (N, n), or a tuple
        of those arrays); the criterion is then that of the earlier data plus the new trajectory.
        Each earlier sample and each new controller-rate sample counts once, so condition the
        earlier logs as the fit will (same decimation) for a fair balance.
    progress : draw a progress bar with the current best criterion on stderr.
    max_evaluations : cap on objective evaluations per start (deterministic stopping for tests).

    Returns
    -------
    ExcitationResult. Deterministic for a seed when the time budget is not hit.

    Raises
    ------
    IdentError for infeasible requests; NumericalError when no start yields a usable trajectory.
    """
    cfg = config if isinstance(config, ExcitationConfig) else ExcitationConfig.from_dict(robot, config)
    _check_home(robot, cfg)
    with single_thread_blas():
        return _design(robot, cfg, logs, progress, max_evaluations)


def _design(robot: Robot, cfg: ExcitationConfig, logs, progress: bool, max_evaluations: int | None) -> ExcitationResult:
    A0 = _prior_information(robot, cfg, logs)
    prob = _Problem(robot, cfg, A0)
    rng = np.random.default_rng(cfg.seed)
    start_clock = time.monotonic()
    prob.eval_cap = math.inf
    per_start_cap = max_evaluations if max_evaluations is not None else math.inf
    best = None
    records = []
    budget_hit = False
    label = "excite" if logs is None else "excite (augment)"
    crit_name = cfg.criterion
    deadline = start_clock + cfg.budget if cfg.budget is not None else math.inf
    with Progress(cfg.starts, label, enabled=progress) as bar:
        for k in range(cfg.starts):
            now = time.monotonic()
            if now > deadline and best is not None:
                budget_hit = True
                break
            z0 = prob.screened_start(rng)
            t_rep = time.monotonic()
            s0, _ = prob.repair(z0, s_max=math.inf)
            t_rep = time.monotonic() - t_rep
            z = z0 * s0
            # each start gets an equal share of what is left of the budget, less the time its
            # closing repair and (for the last) the final checks take, so the budget is kept
            share = (deadline - now) / (cfg.starts - k)
            prob.deadline = now + share - (3.0 if k == cfg.starts - 1 else 1.5) * t_rep if math.isfinite(deadline) else math.inf
            init = prob.criterion(prob.coeffs(z))[crit_name]
            prob.evals = 0
            prob.eval_cap = per_start_cap
            reason = "converged"
            # rising penalty weights: explore first, then pin the limits so the final scaling
            # back into the feasible set costs almost nothing
            for mu in _PENALTY_STAGES:
                prob.mu = mu
                state = {"z": z.copy(), "f": math.inf}

                def fun(zz, _state=state):
                    f, g = prob.objective(zz)
                    if f < _state["f"]:
                        _state["f"], _state["z"] = f, zz.copy()
                    bar.update(k + min(prob.evals / (len(_PENALTY_STAGES) * cfg.max_iterations), 0.99), _note(crit_name, best, k, cfg.starts))
                    return f, g

                try:
                    res = scipy.optimize.minimize(fun, z, jac=True, method="L-BFGS-B", options={"maxiter": cfg.max_iterations, "maxcor": 20})
                    z = res.x
                except _BudgetExhausted:
                    z = state["z"]
                    reason = "time budget" if time.monotonic() > prob.deadline else "evaluation cap"
                    budget_hit = budget_hit or reason == "time budget"
                    break
            s, m = prob.repair(z)
            X = prob.coeffs(z, s)
            crit = prob.criterion(X)
            records.append({"start": k, "initial": init, "final": crit[crit_name], "scale": s, "evaluations": prob.evals, "stop": reason})
            value = crit["cond"] if crit_name == "cond" else -crit["logdet"]
            if s > 0 and np.isfinite(value) and (best is None or value < best[0]):
                best = (value, X, crit)
            bar.update(k + 1, _note(crit_name, best, k, cfg.starts))
    elapsed = time.monotonic() - start_clock
    if best is None:
        raise NumericalError(f"{cfg.source}: no start produced a usable trajectory: the limits and keep-out regions leave too little room around home for an informative motion")
    traj = FourierTrajectory.from_coefficients(robot.joint_names, cfg.period, best[1], cfg.home)
    t, q, dq, ddq = traj.sample(cfg.rate, 1)
    fine = np.concatenate([prob.tcheck, prob.tctrl])
    margins = check_trajectory(robot, cfg, traj, fine)
    if not _feasible(margins):  # pragma: no cover - repair guarantees this; a loud failure if not
        raise NumericalError(f"{cfg.source}: the designed trajectory violates: {'; '.join(margins.violations(robot.joint_names))}")
    w = None if cfg.torque_noise is None else 1.0 / cfg.torque_noise
    A_new = information_matrix(robot, q[:-1], dq[:-1], ddq[:-1], cfg.terms, w, prob.bp) * cfg.periods
    crit_new = criteria_from_information(A_new)
    crit_all = criteria_from_information(A_new + A0) if A0 is not None else crit_new
    crit_prior = criteria_from_information(A0) if A0 is not None else None
    if not crit_all["cond"] < _COND_UNUSABLE:
        raise NumericalError(f"{cfg.source}: the best trajectory found leaves base parameters unidentifiable (condition number {crit_all['cond']:.3g}); the limits leave too little room: widen them or add harmonics")
    units = ["m" if jt == PRISMATIC else "rad" for jt in robot.joint_type]
    return ExcitationResult(robot.name, list(robot.joint_names), traj, cfg, crit_all, crit_new, crit_prior, margins, records, list(prob.bp.names), elapsed, budget_hit, units)


def random_feasible(robot: Robot, config: ExcitationConfig | dict, count: int, seed: int = 0) -> list[tuple[FourierTrajectory, dict]]:
    """`count` random trajectories of the design family, each scaled to the largest feasible motion.

    The baseline an optimized design should beat; returns (trajectory, criteria on the design grid).
    """
    cfg = config if isinstance(config, ExcitationConfig) else ExcitationConfig.from_dict(robot, config)
    _check_home(robot, cfg)
    prob = _Problem(robot, cfg, None)
    rng = np.random.default_rng(seed)
    out = []
    with single_thread_blas():
        for _ in range(count):
            z = prob.random_z(rng)
            s, _ = prob.repair(z, s_max=math.inf)
            X = prob.coeffs(z, s)
            out.append((FourierTrajectory.from_coefficients(robot.joint_names, cfg.period, X, cfg.home), prob.criterion(X)))
    return out


def design_criteria(robot: Robot, config: ExcitationConfig, traj: FourierTrajectory) -> dict:
    """Both criteria of `traj` on the design grid of `config` (what the optimizer minimizes)."""
    prob = _Problem(robot, config, None)
    return prob.criterion(traj.coefficients)


def _note(kind: str, best, start: int, starts: int) -> str:
    head = f"start {start + 1}/{starts}"
    if best is None:
        return head
    return head + (f", best cond {best[2]['cond']:.4g}" if kind == "cond" else f", best logdet {best[2]['logdet']:.5g}")


# --------------------------------------------------------------------------------------------
# Report and files
# --------------------------------------------------------------------------------------------
def _num(x):
    """JSON-safe number: inf/nan become None."""
    x = float(x)
    return x if math.isfinite(x) else None


def summary_dict(result: ExcitationResult) -> dict:
    """The summary as a JSON-ready mapping (criteria, margins, peaks per joint, optimizer record)."""
    cfg, m = result.config, result.margins
    joints = []
    for j, name in enumerate(result.joint_names):
        joints.append(
            {
                "joint": name,
                "unit": result.joint_units[j] if result.joint_units else "rad",
                "home": float(cfg.home[j]),
                "range_used": [float(v) for v in _range_used(result.trajectory, j)],
                "margin_lower": _num(m.position_lower[j]),
                "margin_upper": _num(m.position_upper[j]),
                "peak_velocity": float(m.peak_velocity[j]),
                "velocity_limit": float(cfg.velocity[j]),
                "margin_velocity": _num(m.velocity[j]),
                "peak_acceleration": float(m.peak_acceleration[j]),
                "acceleration_limit": float(cfg.acceleration[j]),
                "margin_acceleration": _num(m.acceleration[j]),
                "peak_torque": float(m.peak_torque[j]),
                "torque_limit": _num(cfg.torque[j]),
                "margin_torque": _num(m.torque[j]),
            }
        )
    return {
        "robot": result.robot_name,
        "criterion_optimized": cfg.criterion,
        "criteria": {k: _num(v) for k, v in result.criteria.items()},
        "criteria_new_trajectory": {k: _num(v) for k, v in result.criteria_new.items()},
        "criteria_earlier_logs": None if result.criteria_prior is None else {**{k: _num(v) for k, v in result.criteria_prior.items()}, "rank_deficient": not math.isfinite(result.criteria_prior["cond"])},
        "base_parameters": len(result.base_names),
        "terms": list(cfg.terms),
        "period_s": cfg.period,
        "harmonics": cfg.harmonics,
        "periods": cfg.periods,
        "rate_hz": cfg.rate,
        "duration_s": cfg.period * cfg.periods,
        "joints": joints,
        "keepout": {name: {"margin_m": _num(v[0]), "closest_point": v[1], "time_s": v[2]} for name, v in m.keepout.items()},
        "notes": _notes(result),
        "checked_on": f"{cfg.design_samples * cfg.check_factor} samples a period and every controller sample, with cushions for excursions between samples",
        "optimizer": {"seed": cfg.seed, "starts": result.starts, "elapsed_s": result.elapsed, "time_budget_s": cfg.budget, "budget_hit": result.budget_hit},
    }


def _notes(result: ExcitationResult) -> list[str]:
    """Warnings a user should read before running the trajectory."""
    notes = []
    if result.criteria["cond"] > 100:
        notes.append(f"condition number {result.criteria['cond']:.3g} is high (values below about 100 are usual for a good excitation, common practice): expect poorly identified parameters; widen the limits, lengthen the period or add harmonics")
    if not np.all(np.isfinite(result.config.torque)):
        free = [j for j, v in zip(result.joint_names, result.config.torque) if not np.isfinite(v)]
        notes.append(f"no torque limit for joint(s) {', '.join(free)}: torques were not constrained there")
    if result.budget_hit:
        notes.append("the time budget stopped the optimizer: a rerun with the same seed may differ; raise the budget for a reproducible result")
    return notes


def _range_used(traj: FourierTrajectory, j: int) -> tuple[float, float]:
    t = np.linspace(0.0, traj.period, 4000, endpoint=False)
    q, _, _ = traj.evaluate(t)
    return float(q[:, j].min()), float(q[:, j].max())


def summary_text(result: ExcitationResult) -> str:
    """Plain-text summary: criteria, per-joint margins and peaks, keep-out margins."""
    from .commands.common import format_table

    d = summary_dict(result)
    c_cond, c_ld = _fmt_crit(result.criteria)
    lines = [
        f"Excitation for {d['robot']}: {d['harmonics']} harmonics, period {d['period_s']:g} s x {d['periods']}, sampled at {d['rate_hz']:g} Hz",
        f"Criteria on {d['base_parameters']} base parameters (joint terms: {', '.join(d['terms']) or 'none'}; optimized: {d['criterion_optimized']})"
        + (", earlier logs and new trajectory combined" if result.criteria_prior is not None else ""),
        f"  condition number (column-scaled base regressor): {c_cond}",
        f"  log det of the information matrix:               {c_ld}",
    ]
    if result.criteria_prior is not None:
        e_cond, e_ld = _fmt_crit(result.criteria_prior)
        n_cond, n_ld = _fmt_crit(result.criteria_new)
        lines += [
            f"  earlier logs alone:   cond {e_cond}, logdet {e_ld}",
            f"  new trajectory alone: cond {n_cond}, logdet {n_ld}",
        ]
    rows = []
    for j in d["joints"]:
        rows.append(
            [
                j["joint"],
                f"{j['range_used'][0]:.3f}..{j['range_used'][1]:.3f} {j['unit']}",
                f"{_fmt(j['margin_lower'])}/{_fmt(j['margin_upper'])}",
                f"{j['peak_velocity']:.3g} / {j['velocity_limit']:.3g}",
                f"{j['peak_acceleration']:.3g} / {j['acceleration_limit']:.3g}",
                f"{j['peak_torque']:.3g} / {_fmt(j['torque_limit'])}",
            ]
        )
    lines += ["", "Per joint (margins after the position margin; peak / limit):"]
    lines.append(format_table(["joint", "range used", "margin lo/hi", "velocity", "acceleration", "torque (prior model)"], rows))
    if d["keepout"]:
        lines += ["", "Keep-out regions (smallest distance beyond each region's margin):"]
        lines.append(format_table(["region", "margin (m)", "closest point", "at t (s)"], [[k, f"{v['margin_m']:.4f}", v["closest_point"], f"{v['time_s']:.3f}"] for k, v in d["keepout"].items()]))
    for note in d["notes"]:
        lines += ["", f"Note: {note}"]
    o = d["optimizer"]
    lines += ["", f"Optimizer: seed {o['seed']}, {len(o['starts'])} starts in {o['elapsed_s']:.1f} s" + (" (time budget reached: rerun with the same budget may differ)" if o["budget_hit"] else "")]
    for s in o["starts"]:
        lines.append(f"  start {s['start']}: {d['criterion_optimized']} {_fmt(s['initial'])} -> {_fmt(s['final'])} (scale {s['scale']:.3f}, {s['evaluations']} evaluations, {s['stop']})")
    lines.append(f"Checked on {d['checked_on']}.")
    return "\n".join(lines)


def _fmt(x) -> str:
    if x is None:
        return "n/a"
    return f"{x:.4g}"


def _fmt_crit(c: dict) -> tuple[str, str]:
    """Readable cond and logdet; a singular information matrix is named as such."""
    if not math.isfinite(c["cond"]):
        return "inf (rank deficient: some base parameters unidentifiable)", "-inf"
    return f"{c['cond']:.4g}", f"{c['logdet']:.5g}"


def trajectory_table(robot_joints: list[str], t, q, dq, ddq) -> str:
    """CSV text in the table convention: time, then per joint ``.q .dq .ddq`` (17 significant digits)."""
    cols = ["time"] + [f"{j}.{s}" for j in robot_joints for s in ("q", "dq", "ddq")]
    data = np.empty((t.size, 1 + 3 * len(robot_joints)))
    data[:, 0] = t
    data[:, 1::3], data[:, 2::3], data[:, 3::3] = q, dq, ddq
    body = "\n".join(",".join(repr(float(v)) for v in row) for row in data)
    return ",".join(cols) + "\n" + body + "\n"


def plot_trajectory(path, result: ExcitationResult, robot: Robot) -> None:
    """PNG: per joint, position, velocity, acceleration and prior-model torque against their limits."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    cfg = result.config
    traj = result.trajectory
    t = np.linspace(0.0, cfg.period * cfg.periods, max(2000, 400 * cfg.periods))
    q, dq, ddq = traj.evaluate(t)
    tau = prior_torque(robot, cfg, q, dq, ddq)
    n = len(result.joint_names)
    ncol = 4
    fig, axes = plt.subplots(n, ncol, figsize=(4.2 * ncol, 1.9 * n + 0.8), sharex=True, squeeze=False)
    for j, name in enumerate(result.joint_names):
        u = result.joint_units[j] if result.joint_units else "rad"
        series = [(q[:, j], f"{u}", (cfg.lower[j], cfg.upper[j]), (cfg.lower[j] + cfg.position_margin[j], cfg.upper[j] - cfg.position_margin[j])), (dq[:, j], f"{u}/s", (-cfg.velocity[j], cfg.velocity[j]), None), (ddq[:, j], f"{u}/s^2", (-cfg.acceleration[j], cfg.acceleration[j]), None)]
        series.append((tau[:, j], "N" if u == "m" else "N m", (-cfg.torque[j], cfg.torque[j]), None))
        for c, (y, unit, lim, inner) in enumerate(series):
            ax = axes[j, c]
            ax.plot(t, y, lw=1.0, color="C0", label="trajectory")
            for v in lim:
                if np.isfinite(v):
                    ax.axhline(v, color="C3", lw=0.8, ls="--", label="limit" if v == lim[0] else None)
            if inner is not None:
                for v in inner:
                    if np.isfinite(v):
                        ax.axhline(v, color="C1", lw=0.8, ls=":", label="limit - margin" if v == inner[0] else None)
            ax.set_ylabel(f"{name}\n[{unit}]" if c == 0 else f"[{unit}]", fontsize=8)
            ax.tick_params(labelsize=7)
            if j == 0:
                ax.set_title(["position", "velocity", "acceleration", "torque (prior model)"][c], fontsize=9)
            if j == 0 and c == 0:
                ax.legend(fontsize=7, loc="upper right")
    for c in range(ncol):
        axes[-1, c].set_xlabel("time [s]", fontsize=8)
    fig.suptitle(f"{result.robot_name}: excitation trajectory against its limits", fontsize=10)
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=90, format="png")
    plt.close(fig)


def write_excitation(out_dir, result: ExcitationResult, robot: Robot) -> dict[str, Path]:
    """Write the design to `out_dir` (created if needed), each file atomically.

    Files: ``trajectory.csv`` (controller rate), ``coefficients.yaml`` (regenerates the CSV),
    ``trajectory.png``, ``summary.txt``, ``summary.json``. Returns {kind: path}.
    """
    import json

    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise IdentError(f"--out {out}: exists and is not a folder")
    cfg = result.config
    t, q, dq, ddq = result.sample()
    # everything is rendered before the first file is written, so a failure leaves no partial set
    csv_text = trajectory_table(result.joint_names, t, q, dq, ddq)
    summ = summary_dict(result)
    json_text = json.dumps(summ, indent=2) + "\n"
    txt = summary_text(result) + "\n"
    out.mkdir(parents=True, exist_ok=True)
    paths = {k: out / v for k, v in (("csv", "trajectory.csv"), ("coefficients", "coefficients.yaml"), ("plot", "trajectory.png"), ("summary", "summary.txt"), ("json", "summary.json"))}
    write_text(paths["csv"], csv_text)
    save_trajectory(paths["coefficients"], result.trajectory, {"robot": result.robot_name, "rate": cfg.rate, "periods": cfg.periods})
    plot_trajectory(paths["plot"], result, robot)
    write_text(paths["summary"], txt)
    write_text(paths["json"], json_text)
    return paths


def verify_trajectory(robot: Robot, config: ExcitationConfig, traj: FourierTrajectory, where: str = "coefficients") -> ExcitationResult:
    """Re-check an existing trajectory against `config` (e.g. new limits) and report it.

    Raises IdentError listing every violated constraint, or naming the joint that does not start
    and end at rest at home (an edited coefficients file); otherwise returns a result with both
    criteria and the margins, as :func:`design_excitation` would. `where` names the file in errors.
    """
    cfg = config
    if traj.joint_names != robot.joint_names:
        raise IdentError(f"{where}: joints {', '.join(traj.joint_names)} do not match the robot's {', '.join(robot.joint_names)}")
    # the limit checks cannot see a velocity or acceleration step at switch-on: the motion must
    # leave and reach home at rest (t = 0 is also every period's end)
    q0, dq0, ddq0 = (v[0] for v in traj.evaluate(np.zeros(1)))
    for k, name in enumerate(traj.joint_names):
        off = {"position - home": q0[k] - traj.home[k], "velocity": dq0[k], "acceleration": ddq0[k]}
        bad = {key: v for key, v in off.items() if abs(v) > REST_TOLERANCE}
        if bad:
            raise IdentError(f"{where}: joint '{name}' does not start and end at rest at home ("
                             + ", ".join(f"{key} {v:.3g}" for key, v in bad.items()) + " at t = 0): not a trajectory ident designed, or edited")
    if abs(traj.period - cfg.period) > 1e-12 * cfg.period:
        cfg = cfg.with_options(period=traj.period)
    cfg = cfg.with_options(harmonics=traj.harmonics, home=traj.home.copy())
    _check_home(robot, cfg)
    t, q, dq, ddq = traj.sample(cfg.rate, 1)
    n_check = cfg.design_samples * cfg.check_factor
    fine = np.concatenate([np.arange(n_check) * (cfg.period / n_check), t])
    m = check_trajectory(robot, cfg, traj, fine)
    bad = m.violations(robot.joint_names)
    if bad:
        raise IdentError(f"{cfg.source}: the trajectory violates: {'; '.join(bad)}")
    w = None if cfg.torque_noise is None else 1.0 / cfg.torque_noise
    A = information_matrix(robot, q[:-1], dq[:-1], ddq[:-1], cfg.terms, w) * cfg.periods
    crit = criteria_from_information(A)
    bp = base_parameters(robot, cfg.terms)
    units = ["m" if jt == PRISMATIC else "rad" for jt in robot.joint_type]
    return ExcitationResult(robot.name, list(robot.joint_names), traj, cfg, crit, crit, None, m, [], list(bp.names), 0.0, False, units)


# --------------------------------------------------------------------------------------------
# Small validators (messages name the key)
# --------------------------------------------------------------------------------------------
def _ticks(period: float, rate: float, key: str) -> int:
    ticks = period * rate
    if abs(ticks - round(ticks)) > 1e-6 * max(1.0, ticks) or round(ticks) < 1:
        raise IdentError(f"{key}: the period {period:g} s is not a whole number of controller ticks at {rate:g} Hz")
    return int(round(ticks))



def _known_keys(d: dict, known: set, where: str) -> None:
    for key in d:
        if key not in known:
            raise IdentError(f"{where}: unknown setting '{key}' (known: {', '.join(sorted(known))})")


def _number(v, key: str) -> float:
    if isinstance(v, bool) or v is None:
        raise IdentError(f"{key}: expected a number, got {v!r}")
    try:
        x = float(v)
    except (TypeError, ValueError):
        raise IdentError(f"{key}: expected a number, got {v!r}") from None
    if not math.isfinite(x):
        raise IdentError(f"{key}: expected a finite number, got {v!r}")
    return x


def _positive(v, key: str) -> float:
    x = _number(v, key)
    if x <= 0:
        raise IdentError(f"{key}: must be positive, got {v!r}")
    return x


def _nonneg(v, key: str) -> float:
    x = _number(v, key)
    if x < 0:
        raise IdentError(f"{key}: must not be negative, got {v!r}")
    return x


def _fraction(v, key: str) -> float:
    x = _positive(v, key)
    if x > 1:
        raise IdentError(f"{key}: a fraction of the description's limit must be in (0, 1], got {v!r}")
    return x


def _int(v, key: str, minimum: int) -> int:
    if not isinstance(v, int) or isinstance(v, bool) or v < minimum:
        raise IdentError(f"{key}: expected an integer >= {minimum}, got {v!r}")
    return v


def _floats(v, key: str, size: int) -> np.ndarray:
    if not isinstance(v, (list, tuple)) or len(v) != size:
        raise IdentError(f"{key}: expected a list of {size} numbers, got {v!r}")
    return np.array([_number(x, key) for x in v])


def _per_joint(robot: Robot, v, key: str, positive: bool = False, nonneg: bool = False, partial: np.ndarray | None = None) -> np.ndarray:
    """Scalar (every joint), list of n values (robot order) or {joint: value}.

    A mapping must name every joint unless `partial` gives the values of the joints it leaves out.
    """
    n = robot.n
    if isinstance(v, dict):
        out = np.full(n, np.nan) if partial is None else np.array(partial, dtype=float)
        for name, x in v.items():
            out[robot_index(robot, name, key)] = _number(x, f"{key}.{name}")
        if partial is None and np.any(np.isnan(out)):
            missing = [robot.joint_names[j] for j in np.flatnonzero(np.isnan(out))]
            raise IdentError(f"{key}: missing joint(s) {', '.join(missing)}")
    elif isinstance(v, (list, tuple)):
        if len(v) != n:
            raise IdentError(f"{key}: expected {n} values (joints {', '.join(robot.joint_names)}), got {len(v)}")
        out = np.array([_number(x, f"{key}[{i}]") for i, x in enumerate(v)])
    else:
        out = np.full(n, _number(v, key))
    if positive and np.any(out <= 0):
        j = int(np.flatnonzero(out <= 0)[0])
        raise IdentError(f"{key}: joint '{robot.joint_names[j]}' must be positive, got {out[j]:g}")
    if nonneg and np.any(out < 0):
        j = int(np.flatnonzero(out < 0)[0])
        raise IdentError(f"{key}: joint '{robot.joint_names[j]}' must not be negative, got {out[j]:g}")
    return out


def robot_index(robot: Robot, name: str, key: str) -> int:
    """Index of joint `name` in `robot`; error naming the config key when unknown."""
    if name not in robot.joint_names:
        raise IdentError(f"{key}: no joint named '{name}' (joints: {', '.join(robot.joint_names)})")
    return robot.joint_names.index(name)
