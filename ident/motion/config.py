"""The excitation design's settings: period, harmonics, home, limits and margins, keep-out regions, criterion, optimizer.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..arm.model import Robot, parse_terms
from ..errors import IdentError
from ..fileio import read_yaml
from ..intake import check_samples, count, number, shown
from ..intake import seed as intake_seed
from .config_values import float_list, fraction_number, known_keys, nonneg_number, per_joint_values, period_ticks, positive_number
from .keepout import REGION_KINDS, KeepoutPoint, Region

CRITERIA = ("cond", "logdet")

#: Default number of optimizer starts: as many as the default budget explores to convergence on a
#: 6- or 7-joint arm with 5 harmonics (bench_excite.py).
DEFAULT_STARTS = 12
#: Default time budget of the optimizer, s.
DEFAULT_BUDGET = 15.0


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
    starts: int = DEFAULT_STARTS
    budget: float | None = DEFAULT_BUDGET
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
        period = positive_number(d.get("period"), f"{where}: period (s)")
        harmonics = d.get("harmonics")
        if not isinstance(harmonics, int) or isinstance(harmonics, bool) or harmonics < 2:
            raise IdentError(f"{where}: harmonics: expected an integer >= 2 (start and end at rest take 3 equations per joint), got {shown(harmonics)}")
        count(harmonics, f"{where}: harmonics", 2, MAX_HARMONICS, limit_name="far above any excitation design, common practice: 3 to 20")
        rate = positive_number(d.get("rate"), f"{where}: rate (controller rate, Hz)")
        number(rate, f"{where}: rate (controller rate, Hz)", "rate")
        period_ticks(period, rate, f"{where}: rate")
        periods = d.get("periods", 1)
        if not isinstance(periods, int) or isinstance(periods, bool) or periods < 1:
            raise IdentError(f"{where}: periods: expected a positive integer, got {shown(periods)}")
        # the trajectory is sampled at the controller rate over every period: bound it by memory
        check_samples(period * rate * periods, f"{where}: period x rate x periods")
        if "home" not in d:
            raise IdentError(f"{where}: home: required (the pose the motion starts and ends at, rad or m per joint)")
        home = per_joint_values(robot, d["home"], f"{where}: home")
        offset_spec = d.get("offset", "free")
        if offset_spec == "free":
            offset = None
        elif offset_spec == "home":
            offset = home.copy()
        else:
            offset = per_joint_values(robot, offset_spec, f"{where}: offset")
            if harmonics < 3:
                raise IdentError(f"{where}: offset: a fixed offset needs harmonics >= 3")
        terms_spec = d.get("terms", "fv,fc")
        if terms_spec is not None and not isinstance(terms_spec, str) and not (
                isinstance(terms_spec, list) and all(isinstance(t, str) for t in terms_spec)):
            raise IdentError(f"{where}: terms: expected term codes such as 'fv,fc' or a list of them, got {shown(terms_spec)}")
        try:
            terms = parse_terms(terms_spec)
        except IdentError as exc:
            raise IdentError(f"{where}: terms: {exc}") from None
        criterion = d.get("criterion", "cond")
        if criterion not in CRITERIA:
            raise IdentError(f"{where}: criterion: expected one of {', '.join(CRITERIA)}, got {shown(criterion)}")

        lim = d.get("limits") or {}
        if not isinstance(lim, dict):
            raise IdentError(f"{where}: limits: expected a mapping")
        known_keys(lim, {"position_margin", "lower", "upper", "velocity", "velocity_scale", "acceleration", "torque", "torque_scale"}, f"{where}: limits")
        margin = per_joint_values(robot, lim.get("position_margin", 0.05), f"{where}: limits.position_margin", nonneg=True)
        lower = robot.lower.copy() if "lower" not in lim else per_joint_values(robot, lim["lower"], f"{where}: limits.lower", partial=robot.lower)
        upper = robot.upper.copy() if "upper" not in lim else per_joint_values(robot, lim["upper"], f"{where}: limits.upper", partial=robot.upper)
        vscale = fraction_number(lim.get("velocity_scale", 0.8), f"{where}: limits.velocity_scale")
        velocity = vscale * robot.velocity_limit
        if "velocity" in lim:
            velocity = per_joint_values(robot, lim["velocity"], f"{where}: limits.velocity", positive=True, partial=velocity)
        if "acceleration" not in lim:
            raise IdentError(f"{where}: limits.acceleration: required (robot descriptions carry no acceleration limits; rad/s^2 or m/s^2 per joint)")
        acceleration = per_joint_values(robot, lim["acceleration"], f"{where}: limits.acceleration", positive=True)
        tscale = fraction_number(lim.get("torque_scale", 0.8), f"{where}: limits.torque_scale")
        torque = tscale * robot.effort_limit
        if "torque" in lim:
            torque = per_joint_values(robot, lim["torque"], f"{where}: limits.torque", positive=True, partial=torque)
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
            torque_model[code] = per_joint_values(robot, vals, f"{where}: torque_model.{code}", partial=np.zeros(robot.n))
        noise = None
        if d.get("torque_noise") is not None:
            noise = per_joint_values(robot, d["torque_noise"], f"{where}: torque_noise", positive=True)

        points, regions = _parse_keepout(robot, d.get("keepout"), f"{where}: keepout")

        opt = d.get("optimizer") or {}
        if not isinstance(opt, dict):
            raise IdentError(f"{where}: optimizer: expected a mapping")
        known_keys(opt, {"seed", "starts", "budget", "max_iterations", "design_samples", "check_factor"}, f"{where}: optimizer")
        budget = opt.get("budget", DEFAULT_BUDGET)
        if budget is not None:
            budget = positive_number(budget, f"{where}: optimizer.budget (s)")
            number(budget, f"{where}: optimizer.budget (s)", "time")
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
            seed=intake_seed(opt.get("seed", 0), f"{where}: optimizer.seed"),
            starts=count(opt.get("starts", DEFAULT_STARTS), f"{where}: optimizer.starts", 1, MAX_STARTS, limit_name="hours of optimizing at the least"),
            budget=budget,
            max_iterations=count(opt.get("max_iterations", 300), f"{where}: optimizer.max_iterations", 1, 10**6, limit_name="L-BFGS-B converges in hundreds"),
            design_samples=count(opt.get("design_samples", max(96, 24 * harmonics)), f"{where}: optimizer.design_samples", 8, MAX_DESIGN_SAMPLES,
                                 limit_name="the design grid is evaluated at every iteration"),
            check_factor=count(opt.get("check_factor", 10), f"{where}: optimizer.check_factor", 1, 1000, limit_name="a 1000x finer check grid"),
            source=where,
        )
        check_samples(cfg.design_samples * cfg.check_factor, f"{where}: optimizer.design_samples x optimizer.check_factor")
        if cfg.design_samples < 4 * harmonics + 1:
            raise IdentError(f"{where}: optimizer.design_samples: {cfg.design_samples} samples cannot resolve {harmonics} harmonics; use at least {4 * harmonics + 1}")
        return cfg

    def with_options(self, **changes) -> "ExcitationConfig":
        """A copy with some settings replaced (e.g. ``seed``, ``budget``, ``starts``, ``criterion``)."""
        import dataclasses

        if "criterion" in changes and changes["criterion"] not in CRITERIA:
            raise IdentError(f"criterion: expected one of {', '.join(CRITERIA)}, got {shown(changes['criterion'])}")
        return dataclasses.replace(self, **changes)


#: upper bounds of the optimizer's counts (each is 100x or more what a design needs)
MAX_HARMONICS = 1000
MAX_STARTS = 10_000
MAX_DESIGN_SAMPLES = 1_000_000


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
    known_keys(spec, {"points", "regions"}, where)
    points = []
    for k, item in enumerate(spec.get("points") or []):
        key = f"{where}.points[{k}]"
        if not isinstance(item, dict) or "link" not in item:
            raise IdentError(f"{key}: expected a mapping with link and point (m, in the link frame)")
        if not isinstance(item["link"], str):
            raise IdentError(f"{key}.link: expected a link name, got {shown(item['link'])}")
        link = item["link"]
        try:
            robot.frame(link)
        except IdentError as exc:
            raise IdentError(f"{key}.link: {exc}") from None
        pt = float_list(item.get("point", [0.0, 0.0, 0.0]), f"{key}.point", 3)
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
            raise IdentError(f"{key}.type: expected one of {', '.join(REGION_KINDS)}, got {shown(kind)}")
        margin = nonneg_number(item.get("margin", 0.0), f"{key}.margin (m)")
        params: dict = {}
        if kind == "plane":
            params["point"] = float_list(item.get("point"), f"{key}.point", 3)
            nrm = float_list(item.get("normal", [0.0, 0.0, 1.0]), f"{key}.normal", 3)
            if np.linalg.norm(nrm) < 1e-12:
                raise IdentError(f"{key}.normal: must be a non-zero vector")
            params["normal"] = nrm / np.linalg.norm(nrm)
        elif kind == "cylinder":
            params["center"] = float_list(item.get("center"), f"{key}.center (x, y)", 2)
            params["radius"] = positive_number(item.get("radius"), f"{key}.radius (m)")
            z = float_list(item.get("z", [-1e3, 1e3]), f"{key}.z (zmin, zmax)", 2)
            if z[1] <= z[0]:
                raise IdentError(f"{key}.z: zmax must exceed zmin")
            params["z"] = z
        elif kind == "box":
            lo = float_list(item.get("lower"), f"{key}.lower", 3)
            hi = float_list(item.get("upper"), f"{key}.upper", 3)
            if np.any(hi <= lo):
                raise IdentError(f"{key}: upper must exceed lower on every axis")
            params["lower"], params["upper"] = lo, hi
        else:
            params["center"] = float_list(item.get("center"), f"{key}.center", 3)
            params["radius"] = positive_number(item.get("radius"), f"{key}.radius (m)")
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
