"""Log profiles: where each joint's channels come from in a log and how they convert to SI.

A profile (YAML, see :func:`load_profile` and the commented example
``datasets_demo/examples/profile.yaml``) names columns or JointState names per joint, units
(deg/rad, mm/m, N m, or motor current in A with gear ratio and torque constant), sign flips,
offsets, time windows and conditioning settings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import DataError
from ..fileio import read_yaml
from ..intake import number, shown
from .dataset import CHANNELS
from .options import LogOptions

PROFILE_VERSION = 1


_D = math.pi / 180.0


# unit -> (factor to SI, joint kind it fits: "r" revolute, "p" prismatic, "" either)
UNITS = {
    "q": {"rad": (1.0, "r"), "deg": (_D, "r"), "m": (1.0, "p"), "mm": (1e-3, "p")},
    "dq": {"rad/s": (1.0, "r"), "deg/s": (_D, "r"), "m/s": (1.0, "p"), "mm/s": (1e-3, "p")},
    "ddq": {"rad/s^2": (1.0, "r"), "deg/s^2": (_D, "r"), "m/s^2": (1.0, "p"), "mm/s^2": (1e-3, "p")},
    "tau": {"N*m": (1.0, "r"), "mN*m": (1e-3, "r"), "N": (1.0, "p"), "A": (1.0, "")},
}


_UNIT_ALIASES = {"Nm": "N*m", "N.m": "N*m", "N m": "N*m", "mNm": "mN*m", "rad/s2": "rad/s^2", "deg/s2": "deg/s^2",
                 "m/s2": "m/s^2", "mm/s2": "mm/s^2", "degree": "deg", "degrees": "deg", "radian": "rad"}


TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}


_DEFAULT_PATTERNS = {"q": "{name}.q", "dq": "{name}.dq", "ddq": "{name}.ddq", "tau": "{name}.tau"}


@dataclass
class ChannelSpec:
    """Where one channel of one joint comes from and how it converts to SI:
    ``value = sign * factor * (raw + offset)`` (offset in the raw unit); for motor current
    ``factor = gear_ratio * torque_constant``. ``limit`` (SI) is a torque saturation level."""

    column: str | None = None
    unit: str | None = None
    sign: float = 1.0
    offset: float = 0.0
    gear_ratio: float | None = None
    torque_constant: float | None = None
    limit: float | None = None
    explicit: bool = False


@dataclass
class LogProfile:
    """A parsed log profile (see :func:`load_profile`)."""

    source: str = "<defaults>"
    format: str = "auto"
    time_column: str | None = "time"
    time_unit: str = "s"
    rate: float | None = None
    time_source: str = "header"
    topic: str | None = None
    patterns: dict = field(default_factory=lambda: dict(_DEFAULT_PATTERNS))
    units: dict = field(default_factory=dict)
    joints: dict = field(default_factory=dict)  # model joint -> (log name, {channel: ChannelSpec})
    conditioning: dict = field(default_factory=dict)


_PROFILE_KEYS = {"log_profile", "format", "time", "topic", "columns", "units", "joints", "windows", "conditioning"}


_TIME_KEYS = {"column", "unit", "rate", "source"}


_JOINT_KEYS = {"name", "q", "dq", "ddq", "tau", "sign"}


_CHANNEL_KEYS = {"column", "unit", "sign", "offset", "gear_ratio", "torque_constant", "limit"}


def load_profile(profile) -> LogProfile:
    """Read a log profile: a YAML file path, a dict with the same layout, or a LogProfile (returned).

    Layout (every key optional)::

        log_profile: 1                      # format version
        format: auto                        # auto | csv | parquet | bag
        time: {column: time, unit: s}       # unit s|ms|us|ns; or {rate: 1000} without a time column;
                                            # bags: {source: header|log}
        topic: /joint_states                # bags
        columns: {q: "{name}.q", tau: "{name}.tau"}   # column patterns, {name} = joint's log name
        units: {q: deg, dq: deg/s, tau: A}  # default unit per channel
        joints:                             # model joint -> log
          shoulder: {name: J1, sign: -1, q: {offset: 90}, tau: {unit: A, gear_ratio: 100, torque_constant: 0.09}}
        windows: [[5, 65]]                  # s from each file's first sample
        conditioning: {period: 10, harmonics: 5, decimate: 10}   # LogOptions fields

    A channel entry may be a column name (string) or a mapping with column, unit, sign, offset,
    gear_ratio, torque_constant, limit.
    """
    if profile is None:
        return LogProfile()
    if isinstance(profile, LogProfile):
        return profile
    if isinstance(profile, dict):
        return _parse_profile(profile, "profile")
    path = Path(profile)
    data = read_yaml(path, "log profile", DataError)
    if data is None:
        data = {}
    return _parse_profile(data, str(path))


def _parse_profile(data, where: str) -> LogProfile:
    if not isinstance(data, dict):
        raise DataError(f"{where}: a profile must be a mapping of settings")
    unknown = set(map(str, data)) - _PROFILE_KEYS
    if unknown:
        raise DataError(f"{where}: unknown key '{sorted(unknown)[0]}' (known: {', '.join(sorted(_PROFILE_KEYS))})")
    ver = data.get("log_profile", PROFILE_VERSION)
    if ver != PROFILE_VERSION:
        raise DataError(f"{where}: log_profile version {shown(ver)} is not supported (this ident reads version {PROFILE_VERSION})")
    p = LogProfile(source=where)
    fmt = data.get("format", "auto")
    if fmt not in ("auto", "csv", "parquet", "bag"):
        raise DataError(f"{where}: format '{fmt}' must be auto, csv, parquet or bag")
    p.format = fmt
    tm = data.get("time", {})
    if isinstance(tm, str):
        tm = {"column": tm}
    if not isinstance(tm, dict):
        raise DataError(f"{where}: 'time' must be a column name or a mapping")
    bad = set(tm) - _TIME_KEYS
    if bad:
        raise DataError(f"{where}: time: unknown key '{sorted(bad)[0]}' (known: {', '.join(sorted(_TIME_KEYS))})")
    for key in ("column", "unit", "source"):
        if key in tm and not isinstance(tm[key], str):
            raise DataError(f"{where}: time.{key} must be text, got {shown(tm[key])}")
    if "rate" in tm:
        r = tm["rate"]
        if isinstance(r, bool) or not isinstance(r, (int, float)) or not r > 0:
            raise DataError(f"{where}: time.rate must be a positive sample rate in Hz, got {shown(r)}")
        p.rate = number(r, f"{where}: time.rate", "rate", DataError)
        p.time_column = tm.get("column")
    else:
        p.time_column = str(tm.get("column", "time"))
    p.time_unit = tm.get("unit", "s")
    if p.time_unit not in TIME_UNITS:
        raise DataError(f"{where}: time.unit '{p.time_unit}' must be one of {', '.join(TIME_UNITS)}")
    p.time_source = tm.get("source", "header")
    if p.time_source not in ("header", "log"):
        raise DataError(f"{where}: time.source '{p.time_source}' must be header or log")
    if "topic" in data:
        if not isinstance(data["topic"], str):
            raise DataError(f"{where}: topic must be text such as /joint_states, got {shown(data['topic'])}")
        p.topic = data["topic"]
    cols = data.get("columns", {})
    if not isinstance(cols, dict) or set(cols) - set(CHANNELS):
        raise DataError(f"{where}: 'columns' must map channels ({', '.join(CHANNELS)}) to patterns like '{{name}}.q'")
    for ch, pat in cols.items():
        if not isinstance(pat, str) or "{name}" not in pat:
            raise DataError(f"{where}: columns.{ch}: pattern must be text containing {{name}}, got {shown(pat)}")
        p.patterns[ch] = pat
    units = data.get("units", {})
    if not isinstance(units, dict) or set(units) - set(CHANNELS):
        raise DataError(f"{where}: 'units' must map channels ({', '.join(CHANNELS)}) to units")
    for ch, u in units.items():
        p.units[ch] = _unit(ch, u, f"{where}: units.{ch}")
    joints = data.get("joints", {}) or {}
    if not isinstance(joints, dict):
        raise DataError(f"{where}: 'joints' must map model joint names to their log entries")
    for jname, entry in joints.items():
        p.joints[str(jname)] = _parse_joint(str(jname), entry, f"{where}: joints.{jname}")
    if not isinstance(data.get("conditioning", {}) or {}, dict):
        raise DataError(f"{where}: 'conditioning' must be a mapping of settings")
    cnd = dict(data.get("conditioning", {}) or {})
    if "windows" in data:
        cnd["windows"] = data["windows"]
    LogOptions.from_mapping(cnd, f"{where}: conditioning")  # validate now, name the profile
    p.conditioning = cnd
    return p


def _unit(channel: str, unit, where: str) -> str:
    u = _UNIT_ALIASES.get(str(unit), str(unit))
    if u not in UNITS[channel]:
        raise DataError(f"{where}: unit '{unit}' is not a {channel} unit (use one of {', '.join(UNITS[channel])})")
    return u


def _parse_joint(jname: str, entry, where: str):
    if entry is None:
        entry = {}
    if isinstance(entry, str):
        entry = {"name": entry}
    if not isinstance(entry, dict):
        raise DataError(f"{where}: expected a log name or a mapping")
    bad = set(entry) - _JOINT_KEYS
    if bad:
        raise DataError(f"{where}: unknown key '{sorted(bad)[0]}' (known: {', '.join(sorted(_JOINT_KEYS))})")
    log_name = entry.get("name", jname)
    if not isinstance(log_name, (str, int)) or isinstance(log_name, bool):
        raise DataError(f"{where}: name must be the joint's name in the log, got {shown(log_name)}")
    log_name = str(log_name)
    sign = entry.get("sign", 1)
    if sign not in (1, -1):
        raise DataError(f"{where}: sign must be 1 or -1, got {shown(sign)}")
    specs = {}
    for ch in CHANNELS:
        c = entry.get(ch)
        if isinstance(c, str):
            c = {"column": c}
        if c is None:
            c = {}
        if not isinstance(c, dict):
            raise DataError(f"{where}.{ch}: expected a column name or a mapping")
        bad = set(c) - _CHANNEL_KEYS
        if bad:
            raise DataError(f"{where}.{ch}: unknown key '{sorted(bad)[0]}' (known: {', '.join(sorted(_CHANNEL_KEYS))})")
        if c.get("column") is not None and not isinstance(c["column"], str):
            raise DataError(f"{where}.{ch}: column must be a column name, got {shown(c['column'])}")
        spec = ChannelSpec(column=c.get("column"), explicit=bool(c.get("column")))
        if "unit" in c:
            spec.unit = _unit(ch, c["unit"], f"{where}.{ch}.unit")
        s = c.get("sign", sign)
        if s not in (1, -1):
            raise DataError(f"{where}.{ch}: sign must be 1 or -1, got {shown(s)}")
        spec.sign = float(s)
        for key in ("offset", "gear_ratio", "torque_constant", "limit"):
            if key in c:
                v = c[key]
                v = number(v, f"{where}.{ch}.{key}", "position" if key == "offset" and ch == "q" else "scale", DataError)
                if key in ("gear_ratio", "torque_constant", "limit") and v <= 0:
                    raise DataError(f"{where}.{ch}.{key}: must be positive, got {shown(v)}")
                setattr(spec, key, float(v))
        if (spec.gear_ratio or spec.torque_constant or spec.limit) and ch != "tau":
            raise DataError(f"{where}.{ch}: gear_ratio, torque_constant and limit apply to tau only")
        specs[ch] = spec
    return log_name, specs
