"""Logs in, clean samples out: readers (CSV, Parquet, ROS 1/2 bags), log profiles, validation and
the conditioned data set that identification works on.

Data flow::

    files --read_log--> RawLog (SI units, validated) --split--> segments --condition--> Dataset

Default table convention (no profile needed): a column ``time`` in seconds and, per joint,
``<joint>.q`` (rad or m), ``<joint>.dq`` (optional), ``<joint>.ddq`` (optional) and ``<joint>.tau``
(N m or N). ROS bags: ``sensor_msgs/msg/JointState`` messages (name, position, velocity, effort)
on one topic, time from the message header.

Anything else is described by a *log profile* (YAML, see :func:`load_profile` and the commented
example ``datasets_demo/examples/profile.yaml``): columns or JointState names per joint, units
(deg/rad, mm/m, N m, or motor current in A with gear ratio and torque constant), sign flips,
offsets, time windows and conditioning settings.

Nothing is repaired silently: malformed input raises :class:`ident.errors.DataError` naming the
file, column and row; recoverable oddities (gaps, irregular sampling, clipped torques, extra
joints) are handled in a documented way and listed in ``Dataset.warnings``.

Conditioning (:class:`LogOptions`, per segment): parallel zero-phase Butterworth low-pass on
positions and torques, derivatives of the filtered positions, edge trim, clipped-torque removal,
decimation, optional averaging over excitation periods (torque noise variance in
``Dataset.noise_var``), and ``Segment.slow`` flags where sign(dq) is unreliable for the Coulomb
term. Torque-channel delay: :func:`preliminary_delay` (from a preliminary fit),
:func:`estimate_dataset_delay` (against any prediction), :func:`apply_delay`.
"""

from __future__ import annotations

import csv
import dataclasses
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from . import conditioning as cond
from .errors import DataError, IdentError, NumericalError, first_line
from .fileio import read_yaml

CHANNELS = ("q", "dq", "ddq", "tau")
PROFILE_VERSION = 1

_D = math.pi / 180.0
# unit -> (factor to SI, joint kind it fits: "r" revolute, "p" prismatic, "" either)
_UNITS = {
    "q": {"rad": (1.0, "r"), "deg": (_D, "r"), "m": (1.0, "p"), "mm": (1e-3, "p")},
    "dq": {"rad/s": (1.0, "r"), "deg/s": (_D, "r"), "m/s": (1.0, "p"), "mm/s": (1e-3, "p")},
    "ddq": {"rad/s^2": (1.0, "r"), "deg/s^2": (_D, "r"), "m/s^2": (1.0, "p"), "mm/s^2": (1e-3, "p")},
    "tau": {"N*m": (1.0, "r"), "mN*m": (1e-3, "r"), "N": (1.0, "p"), "A": (1.0, "")},
}
_UNIT_ALIASES = {"Nm": "N*m", "N.m": "N*m", "N m": "N*m", "mNm": "mN*m", "rad/s2": "rad/s^2", "deg/s2": "deg/s^2",
                 "m/s2": "m/s^2", "mm/s2": "mm/s^2", "degree": "deg", "degrees": "deg", "radian": "rad"}
_TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
_DEFAULT_PATTERNS = {"q": "{name}.q", "dq": "{name}.dq", "ddq": "{name}.ddq", "tau": "{name}.tau"}
_BAG_FIELDS = {"q": "position", "dq": "velocity", "tau": "effort"}
TABLE_SUFFIXES = {".csv": "csv", ".txt": "csv", ".parquet": "parquet", ".pq": "parquet"}
BAG_SUFFIXES = {".bag": "bag", ".db3": "bag", ".mcap": "bag"}
#: A torque within this fraction of its saturation level counts as clipped.
CLIP_FRACTION = 0.999


# =================================================================================================
# Samples
# =================================================================================================


@dataclass
class Segment:
    """One stretch of uniformly sampled, gap-free data from one file.

    Arrays are samples first, SI units, joints in the data set's order: ``t`` (m,) s; ``q``, ``dq``,
    ``ddq``, ``tau`` (m, n). Before conditioning ``dq``/``ddq`` may be None (not logged).
    ``slow`` (m, n) bool flags samples whose |dq| is below the data set's slow-velocity threshold,
    where sign(dq) of the Coulomb term is unreliable (the fit may drop or down-weight them).
    """

    source: str
    t: np.ndarray
    q: np.ndarray
    dq: np.ndarray | None
    ddq: np.ndarray | None
    tau: np.ndarray
    slow: np.ndarray | None = None

    @property
    def n_samples(self) -> int:
        return int(self.t.shape[0])

    @property
    def dt(self) -> float:
        """Sample step (s): the median step of ``t``."""
        return float(np.median(np.diff(self.t))) if self.t.shape[0] > 1 else float("nan")

    @property
    def duration(self) -> float:
        return float(self.t[-1] - self.t[0]) if self.t.shape[0] else 0.0


@dataclass
class Dataset:
    """Identification samples: joint names, segments, and what happened on the way in.

    Stacked properties ``t``, ``q``, ``dq``, ``ddq``, ``tau`` (N, n) concatenate the segments (a
    new array each call). ``noise_var`` (n,) is the per-joint torque noise variance of one sample
    (N^2 m^2) when period averaging estimated it, else None. ``info`` holds counts and settings
    (see :func:`describe`); ``warnings`` is a list of one-line messages.
    """

    joint_names: list[str]
    segments: list[Segment]
    warnings: list[str] = field(default_factory=list)
    noise_var: np.ndarray | None = None
    info: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        return len(self.joint_names)

    @property
    def n_samples(self) -> int:
        return int(sum(s.n_samples for s in self.segments))

    def _stack(self, name: str):
        parts = [getattr(s, name) for s in self.segments]
        if not parts:
            return np.zeros((0,) if name == "t" else (0, self.n))
        if any(p is None for p in parts):
            return None
        return np.concatenate(parts, axis=0)

    @property
    def t(self):
        return self._stack("t")

    @property
    def q(self):
        return self._stack("q")

    @property
    def dq(self):
        return self._stack("dq")

    @property
    def ddq(self):
        return self._stack("ddq")

    @property
    def tau(self):
        return self._stack("tau")

    @property
    def slow(self):
        return self._stack("slow")

    def segment_slices(self) -> list[slice]:
        """Row slices of each segment in the stacked arrays."""
        out, k = [], 0
        for s in self.segments:
            out.append(slice(k, k + s.n_samples))
            k += s.n_samples
        return out

    def split(self, stacked: np.ndarray) -> list[np.ndarray]:
        """Cut a stacked (N, ...) array (e.g. a predicted torque) into per-segment pieces."""
        stacked = np.asarray(stacked)
        if stacked.shape[0] != self.n_samples:
            raise DataError(f"expected {self.n_samples} rows (one per sample), got {stacked.shape[0]}")
        return [stacked[s] for s in self.segment_slices()]


# =================================================================================================
# Options
# =================================================================================================


@dataclass
class LogOptions:
    """How raw logs become identification samples (every field has a CLI option, see
    :func:`add_log_arguments`, and a key of the same name in a profile's ``conditioning`` section).

    cutoff : low-pass cutoff, Hz; None = :data:`ident.conditioning.CUTOFF_RATIO` x the highest
        excited frequency if known; 0 = no filtering.
    max_frequency : highest excited frequency, Hz (or derived from ``period`` and ``harmonics``).
    period : excitation period, s. Data are averaged over whole periods (per segment) unless
        ``average`` is false; gives the per-joint noise variance.
    harmonics : number of harmonics of the excitation (highest frequency = harmonics / period).
    filter_order : Butterworth order (applied forwards and backwards).
    derivative : "central" or "savgol"; savgol_window : odd samples (default from the cutoff).
    logged_velocity / logged_acceleration : use the log's dq / ddq (filtered with the same low-pass)
        instead of differentiating.
    decimate : keep every k-th sample after filtering.
    max_gap : a time step longer than this many nominal steps splits the data into segments.
    jitter : relative step irregularity above which a segment is resampled to a uniform grid.
    trim : seconds dropped at both ends of each segment (filter edge effects); None = two cutoff periods.
    windows : list of (start, end) s, relative to each file's first sample; None = everything.
    delay : torque-channel delay to remove, s (scalar or one per joint; positive = torque lags).
    slow_velocity : |dq| threshold (rad/s or m/s) below which samples are flagged ``slow``.
    reversal_margin : also flag as ``slow`` the samples within this many seconds of a velocity
        reversal (s); None = a quarter cutoff period (0 without a low-pass). The parallel low-pass
        smears the Coulomb torque step over about a cutoff period while sign(dq) switches at once,
        which biases the Coulomb and viscous estimates unless those samples are left out.
    drop_clipped : drop samples where a torque sits at its saturation level (robot effort limit or
        the profile's ``limit``); neighbours within the filter support go too.
    """

    cutoff: float | None = None
    max_frequency: float | None = None
    period: float | None = None
    harmonics: int | None = None
    average: bool = True
    filter_order: int = cond.FILTER_ORDER
    derivative: str = "central"
    savgol_window: int | None = None
    logged_velocity: bool = False
    logged_acceleration: bool = False
    decimate: int = 1
    max_gap: float = 5.0
    jitter: float = 0.05
    trim: float | None = None
    windows: list | None = None
    delay: Any = None
    slow_velocity: float = 0.01
    reversal_margin: float | None = None
    drop_clipped: bool = True

    @classmethod
    def from_mapping(cls, mapping: dict | None, where: str = "options") -> "LogOptions":
        """Build from a dict (profile section or API call); unknown keys and bad values are errors."""
        return cls().updated(mapping, where)

    def updated(self, mapping: dict | None, where: str = "options") -> "LogOptions":
        """A copy with the (validated) entries of `mapping` set; None values are ignored."""
        out = dataclasses.replace(self)
        names = {f.name for f in dataclasses.fields(self)}
        for key, val in (mapping or {}).items():
            key_n = str(key).replace("-", "_")
            if key_n not in names:
                raise DataError(f"{where}: unknown setting '{key}' (known: {', '.join(sorted(names))})")
            if val is None:
                continue
            setattr(out, key_n, _check_option(key_n, val, where))
        return out

    def resolved_cutoff(self) -> float | None:
        """The cutoff to use (Hz), 0 for none, or None when unknown."""
        if self.cutoff is not None:
            return float(self.cutoff)
        if self.max_frequency:
            return cond.default_cutoff(self.max_frequency)
        if self.period and self.harmonics:
            return cond.default_cutoff(self.harmonics / self.period)
        return None


def excitation_options(path) -> dict:
    """``{"period": s, "harmonics": K}`` read from an excitation file of ``ident excite`` (its
    coefficients YAML or its config), so the default cutoff follows the excitation's highest harmonic."""
    p = Path(path)
    d = read_yaml(p, "excitation file", DataError)
    if not isinstance(d, dict) or "period" not in d or "harmonics" not in d:
        raise DataError(f"{p}: an excitation file needs top-level 'period' (s) and 'harmonics'")
    out = {"period": d["period"], "harmonics": d["harmonics"]}
    LogOptions.from_mapping(out, str(p))  # same checks as the options themselves
    return out


def _check_option(key: str, val, where: str):
    def bad(what):
        raise DataError(f"{where}: '{key}' {what}, got {val!r}")

    if key in ("average", "logged_velocity", "logged_acceleration", "drop_clipped"):
        if not isinstance(val, (bool, np.bool_)):
            bad("must be true or false")
        return bool(val)
    if key == "derivative":
        if val not in cond.DERIVATIVE_METHODS:
            bad(f"must be one of {', '.join(cond.DERIVATIVE_METHODS)}")
        return val
    if key in ("filter_order", "decimate", "harmonics", "savgol_window"):
        if isinstance(val, bool) or not isinstance(val, (int, np.integer)) or val < 1:
            bad("must be a positive integer")
        return int(val)
    if key == "windows":
        return _parse_windows(val, f"{where}: 'windows'")
    if key == "delay":
        arr = np.asarray(val, dtype=float) if _is_number_list(val) else None
        if arr is None or arr.ndim > 1 or not np.all(np.isfinite(arr)):
            bad("must be a number of seconds or a list of them, one per joint")
        return float(arr) if arr.ndim == 0 else arr
    if isinstance(val, bool) or not isinstance(val, (int, float, np.number)) or not math.isfinite(val):
        bad("must be a finite number")
    val = float(val)
    if key in ("cutoff", "trim", "slow_velocity", "reversal_margin") and val < 0:
        bad("must not be negative")
    if key in ("max_frequency", "period", "max_gap", "jitter") and val <= 0:
        bad("must be positive")
    return val


def _is_number_list(val) -> bool:
    if isinstance(val, bool):
        return False
    if isinstance(val, (int, float, np.number)):
        return True
    return isinstance(val, (list, tuple, np.ndarray)) and all(
        isinstance(v, (int, float, np.number)) and not isinstance(v, bool) for v in val
    )


def _parse_windows(val, where: str) -> list[tuple[float, float]]:
    if isinstance(val, (list, tuple)) and len(val) == 2 and all(_is_number_list(v) and not isinstance(v, (list, tuple)) for v in val):
        val = [val]
    if not isinstance(val, (list, tuple)) or not val:
        raise DataError(f"{where}: expected a list of [start, end] pairs in seconds")
    out = []
    for w in val:
        if not (isinstance(w, (list, tuple)) and len(w) == 2 and _is_number_list(list(w))):
            raise DataError(f"{where}: window {w!r} is not a [start, end] pair of numbers")
        a, b = float(w[0]), float(w[1])
        if not (math.isfinite(a) and math.isfinite(b) and b > a):
            raise DataError(f"{where}: window [{a}, {b}] must have finite start < end")
        out.append((a, b))
    return out


# =================================================================================================
# Log profile
# =================================================================================================


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
        raise DataError(f"{where}: log_profile version {ver!r} is not supported (this ident reads version {PROFILE_VERSION})")
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
            raise DataError(f"{where}: time.{key} must be text, got {tm[key]!r}")
    if "rate" in tm:
        r = tm["rate"]
        if isinstance(r, bool) or not isinstance(r, (int, float)) or not r > 0:
            raise DataError(f"{where}: time.rate must be a positive sample rate in Hz, got {r!r}")
        p.rate = float(r)
        p.time_column = tm.get("column")
    else:
        p.time_column = str(tm.get("column", "time"))
    p.time_unit = tm.get("unit", "s")
    if p.time_unit not in _TIME_UNITS:
        raise DataError(f"{where}: time.unit '{p.time_unit}' must be one of {', '.join(_TIME_UNITS)}")
    p.time_source = tm.get("source", "header")
    if p.time_source not in ("header", "log"):
        raise DataError(f"{where}: time.source '{p.time_source}' must be header or log")
    if "topic" in data:
        if not isinstance(data["topic"], str):
            raise DataError(f"{where}: topic must be text such as /joint_states, got {data['topic']!r}")
        p.topic = data["topic"]
    cols = data.get("columns", {})
    if not isinstance(cols, dict) or set(cols) - set(CHANNELS):
        raise DataError(f"{where}: 'columns' must map channels ({', '.join(CHANNELS)}) to patterns like '{{name}}.q'")
    for ch, pat in cols.items():
        if not isinstance(pat, str) or "{name}" not in pat:
            raise DataError(f"{where}: columns.{ch}: pattern must be text containing {{name}}, got {pat!r}")
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
    if u not in _UNITS[channel]:
        raise DataError(f"{where}: unit '{unit}' is not a {channel} unit (use one of {', '.join(_UNITS[channel])})")
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
        raise DataError(f"{where}: name must be the joint's name in the log, got {log_name!r}")
    log_name = str(log_name)
    sign = entry.get("sign", 1)
    if sign not in (1, -1):
        raise DataError(f"{where}: sign must be 1 or -1, got {sign!r}")
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
            raise DataError(f"{where}.{ch}: column must be a column name, got {c['column']!r}")
        spec = ChannelSpec(column=c.get("column"), explicit=bool(c.get("column")))
        if "unit" in c:
            spec.unit = _unit(ch, c["unit"], f"{where}.{ch}.unit")
        s = c.get("sign", sign)
        if s not in (1, -1):
            raise DataError(f"{where}.{ch}: sign must be 1 or -1, got {s!r}")
        spec.sign = float(s)
        for key in ("offset", "gear_ratio", "torque_constant", "limit"):
            if key in c:
                v = c[key]
                if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                    raise DataError(f"{where}.{ch}.{key}: must be a finite number, got {v!r}")
                if key in ("gear_ratio", "torque_constant", "limit") and v <= 0:
                    raise DataError(f"{where}.{ch}.{key}: must be positive, got {v!r}")
                setattr(spec, key, float(v))
        if (spec.gear_ratio or spec.torque_constant or spec.limit) and ch != "tau":
            raise DataError(f"{where}.{ch}: gear_ratio, torque_constant and limit apply to tau only")
        specs[ch] = spec
    return log_name, specs


# =================================================================================================
# Reading
# =================================================================================================


@dataclass
class RawLog:
    """One file's samples in SI units after validation: ``t`` (m,) s; ``q``, ``tau`` (m, n);
    ``dq``/``ddq`` (m, n) or None when not logged; ``limit`` (n,) torque saturation levels (inf: none)."""

    source: str
    joint_names: list[str]
    t: np.ndarray
    q: np.ndarray
    dq: np.ndarray | None
    ddq: np.ndarray | None
    tau: np.ndarray
    limit: np.ndarray
    warnings: list[str] = field(default_factory=list)


def log_format(path, profile: LogProfile | None = None) -> str:
    """"csv", "parquet" or "bag" for `path` (profile's format, else the suffix; a folder is a ROS 2 bag)."""
    p = Path(path)
    if profile is not None and profile.format != "auto":
        return profile.format
    if p.is_dir():
        return "bag"
    fmt = TABLE_SUFFIXES.get(p.suffix.lower()) or BAG_SUFFIXES.get(p.suffix.lower())
    if fmt is None:
        raise DataError(f"{p}: unknown log type '{p.suffix}' (expected .csv, .parquet, .bag, .db3, .mcap or a ROS 2 bag folder; or set format in the profile)")
    return fmt


def read_log(path, robot=None, profile=None) -> RawLog:
    """Read one log file into SI arrays, validated (times, finiteness, joints, units).

    Parameters
    ----------
    path : CSV, Parquet, ROS 1 bag (.bag) or ROS 2 bag (folder, .db3 or .mcap).
    robot : optional :class:`ident.model.Robot`; joints are then put in its order, its joint types
        check the units and its limits catch implausible values.
    profile : optional profile (path, dict or :class:`LogProfile`).
    """
    prof = load_profile(profile)
    p = Path(path)
    if not p.exists():
        raise DataError(f"{p}: log file not found")
    fmt = log_format(p, prof)
    if fmt == "bag":
        raw = _read_bag(p, robot, prof)
    else:
        raw = _read_table(p, fmt, robot, prof)
    _check_plausible(raw, robot)
    return raw


def _joint_map(available_names: list[str], robot, prof: LogProfile, where: str):
    """Model joint names in order, with their log names, and warnings about unused log joints."""
    warnings = []
    if robot is not None:
        model = list(robot.joint_names)
        for j in prof.joints:
            if j not in model:
                raise DataError(f"{prof.source}: joint '{j}' is not a joint of the model {robot.name} (joints: {', '.join(model)})")
    elif prof.joints:
        model = list(prof.joints)
    else:
        model = list(available_names)
        if not model:
            raise DataError(f"{where}: no joint columns found (expected columns like '{prof.patterns['q'].format(name='<joint>')}')")
    log_names = [prof.joints[j][0] if j in prof.joints else j for j in model]
    extra = [a for a in available_names if a not in log_names]
    if extra:
        warnings.append(f"{where}: ignored joints not in the model: {', '.join(extra)}")
    return model, log_names, warnings


def _channel_spec(prof: LogProfile, joint: str, ch: str) -> ChannelSpec:
    if joint in prof.joints:
        return prof.joints[joint][1][ch]
    return ChannelSpec()


def _factor(spec: ChannelSpec, ch: str, prof: LogProfile, jtype: int | None, where: str) -> float:
    unit = spec.unit or prof.units.get(ch)
    if unit is None:
        return 1.0
    scale, kind = _UNITS[ch][unit]
    if jtype is not None and kind and kind != ("p" if jtype == 1 else "r"):
        jk = "prismatic" if jtype == 1 else "revolute"
        raise DataError(f"{where}: unit '{unit}' does not fit a {jk} joint")
    if unit == "A":
        if spec.gear_ratio is None or spec.torque_constant is None:
            raise DataError(f"{where}: a motor current (unit A) needs gear_ratio and torque_constant in the profile")
        scale = spec.gear_ratio * spec.torque_constant
    return scale


def _table_columns(path: Path, fmt: str) -> list[str]:
    try:
        if fmt == "parquet":
            import pyarrow.parquet as pq

            return list(pq.read_schema(path).names)
        with open(path, newline="", encoding="utf-8") as fh:
            header = next(csv.reader(fh), None)
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise DataError(f"{path}: cannot read the header ({first_line(exc)})") from None
    except Exception as exc:  # pyarrow raises its own types for files that are not Parquet
        raise DataError(f"{path}: not a readable {fmt} file ({first_line(exc)})") from None
    if not header:
        raise DataError(f"{path}: empty file, no header row")
    return [h.strip() for h in header]


def _available_joints(columns: list[str], pattern: str) -> list[str]:
    rx = re.compile("^" + re.escape(pattern).replace(re.escape("{name}"), "(.+)") + "$")
    return [m.group(1) for c in columns if (m := rx.match(c))]


def _read_table(path: Path, fmt: str, robot, prof: LogProfile) -> RawLog:
    columns = _table_columns(path, fmt)
    dup = sorted({c for c in columns if columns.count(c) > 1})
    if dup:
        raise DataError(f"{path}: column '{dup[0]}' appears more than once")
    colset = set(columns)
    model, log_names, warns = _joint_map(_available_joints(columns, prof.patterns["q"]), robot, prof, str(path))
    n = len(model)
    # which column feeds each channel of each joint
    wanted: dict[str, list[str | None]] = {}
    for ch in CHANNELS:
        cols = []
        for j, ln in zip(model, log_names):
            spec = _channel_spec(prof, j, ch)
            col = spec.column or prof.patterns[ch].format(name=ln)
            if col not in colset:
                if spec.explicit or ch in ("q", "tau"):
                    src = f"profile {prof.source}" if spec.explicit else "the column convention"
                    raise DataError(f"{path}: no column '{col}' for joint '{j}' ({ch}), as named by {src}")
                col = None
            cols.append(col)
        wanted[ch] = cols
    for ch in ("dq", "ddq"):
        if any(c is not None for c in wanted[ch]) and any(c is None for c in wanted[ch]):
            missing = [j for j, c in zip(model, wanted[ch]) if c is None]
            raise DataError(f"{path}: {ch} is logged for some joints but not for {', '.join(missing)}")
    tcol = prof.time_column
    if prof.rate is None and tcol not in colset:
        raise DataError(f"{path}: no time column '{tcol}' (name it in the profile: time: {{column: ...}}, or give time: {{rate: HZ}})")
    need = [c for ch in CHANNELS for c in wanted[ch] if c is not None]
    if prof.rate is None:
        need = [tcol] + need
    get = _column_source(path, fmt, need)
    m = get.n_rows
    if m == 0:
        raise DataError(f"{path}: no data rows")
    if prof.rate is None:
        t = _numeric(get(tcol), path, tcol) * _TIME_UNITS[prof.time_unit]
    else:
        t = np.arange(m, dtype=float) / prof.rate
    arrays = {}
    jt = robot.joint_type if robot is not None else [None] * n
    limit = np.full(n, np.inf)
    if robot is not None:
        limit[:] = robot.effort_limit
    for ch in CHANNELS:
        if wanted[ch][0] is None:
            arrays[ch] = None
            continue
        a = np.empty((m, n), order="F")  # column-major: each column is written and filtered contiguously
        for k, (j, col) in enumerate(zip(model, wanted[ch])):
            spec = _channel_spec(prof, j, ch)
            f = _factor(spec, ch, prof, jt[k], f"{path}: column '{col}'")
            a[:, k] = _numeric(get(col), path, col)
            _convert(a[:, k], spec, f)
            if ch == "tau" and spec.limit is not None:
                limit[k] = spec.limit
        arrays[ch] = a
    del get
    raw = RawLog(str(path), model, t, arrays["q"], arrays["dq"], arrays["ddq"], arrays["tau"], limit, warns)
    _check_times(raw.t, str(path), "row")
    return raw


def _convert(x: np.ndarray, spec: ChannelSpec, factor: float) -> None:
    """In place: x <- sign * factor * (x + offset)."""
    if spec.offset:
        x += spec.offset
    s = spec.sign * factor
    if s != 1.0:
        x *= s


class _column_source:
    """Reads named columns of a table one at a time (Parquet) or from one parse (CSV)."""

    def __init__(self, path: Path, fmt: str, columns: list[str]):
        self.path = path
        self.fmt = fmt
        try:
            if fmt == "parquet":
                import pyarrow.parquet as pq

                self._pf = pq.ParquetFile(path)
                self.n_rows = int(self._pf.metadata.num_rows)
                self._table = None
            else:
                import pyarrow as pa
                import pyarrow.csv as pacsv

                self._table = pacsv.read_csv(
                    path,
                    convert_options=pacsv.ConvertOptions(
                        include_columns=columns,
                        column_types={c: pa.float64() for c in columns},
                        strings_can_be_null=True,
                    ),
                )
                self.n_rows = self._table.num_rows
        except Exception as exc:  # pyarrow's ArrowInvalid & co: name the file, keep one line
            detail = _diagnose_csv(path, columns) if fmt == "csv" else None
            raise DataError(detail or f"{path}: cannot read as {fmt} ({first_line(exc)})") from None

    def __call__(self, column: str):
        try:
            if self._table is not None:
                col = self._table.column(column)
            else:
                col = self._pf.read(columns=[column]).column(0)
        except Exception as exc:
            raise DataError(f"{self.path}: cannot read column '{column}' ({first_line(exc)})") from None
        return col


def _diagnose_csv(path: Path, columns: list[str]) -> str | None:
    """After a failed fast parse, find the first offending row and column (slow, error path only)."""
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            rd = csv.reader(fh)
            header = [h.strip() for h in next(rd)]
            idx = {c: header.index(c) for c in columns if c in header}
            for row_no, row in enumerate(rd, start=1):
                if not row:
                    continue
                if len(row) != len(header):
                    return f"{path}: data row {row_no} has {len(row)} fields, the header has {len(header)}"
                for c, i in idx.items():
                    cell = row[i].strip()
                    if cell == "":
                        return f"{path}: column '{c}' has an empty value at data row {row_no}"
                    try:
                        float(cell)
                    except ValueError:
                        return f"{path}: column '{c}' has a non-numeric value {cell[:20]!r} at data row {row_no}"  # repr: a quoted cell may hold a line break
    except (OSError, UnicodeDecodeError, csv.Error, StopIteration) as exc:
        return f"{path}: cannot read as csv ({first_line(exc)})"
    return None


def _numeric(col, path: Path, name: str) -> np.ndarray:
    """A pyarrow column as float64 numpy; clear errors for text, nulls, NaN and inf."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not (pa.types.is_floating(col.type) or pa.types.is_integer(col.type) or pa.types.is_decimal(col.type)):
        raise DataError(f"{path}: column '{name}' is not numeric (type {col.type})")
    if col.null_count:
        row = int(np.flatnonzero(pc.is_null(col).to_numpy(zero_copy_only=False))[0])
        # pyarrow's CSV reader turns empty cells and the texts NaN/NA/null alike into nulls
        raise DataError(f"{path}: column '{name}' has an empty or NaN value at data row {row + 1}")
    a = col.to_numpy().astype(float, copy=False)
    if not np.all(np.isfinite(a)):
        row = int(np.flatnonzero(~np.isfinite(a))[0])
        raise DataError(f"{path}: column '{name}' has a non-finite value ({a[row]}) at data row {row + 1}")
    return a


def _check_times(t: np.ndarray, where: str, unit: str) -> None:
    if t.shape[0] < 2:
        raise DataError(f"{where}: only {t.shape[0]} sample(s); need a time series")
    d = np.diff(t)
    bad = np.flatnonzero(d <= 0)
    if bad.size:
        k = int(bad[0]) + 1
        what = "duplicate" if d[bad[0]] == 0 else "decreasing (non-monotonic)"
        raise DataError(f"{where}: {what} timestamp at data {unit} {k + 1} (t = {t[k]:.9g} s after {t[k - 1]:.9g} s)")


def _read_bag(path: Path, robot, prof: LogProfile) -> RawLog:
    try:
        from rosbags.highlevel import AnyReader
    except ImportError:  # pragma: no cover - rosbags is a dependency
        raise DataError("reading ROS bags needs the 'rosbags' package") from None
    where = str(path)
    if path.suffix.lower() in (".db3", ".mcap") and (path.parent / "metadata.yaml").is_file():
        path = path.parent  # a ROS 2 bag is its folder (metadata.yaml + storage files)
    msgs = []
    try:
        with AnyReader([path]) as reader:
            conns = [c for c in reader.connections if c.msgtype == "sensor_msgs/msg/JointState"]
            if prof.topic is not None:
                sel = [c for c in conns if c.topic == prof.topic]
                if not sel:
                    topics = sorted({c.topic for c in conns}) or ["none"]
                    raise DataError(f"{where}: no sensor_msgs/JointState topic '{prof.topic}' (JointState topics: {', '.join(topics)})")
            else:
                topics = sorted({c.topic for c in conns})
                if not topics:
                    raise DataError(f"{where}: no sensor_msgs/JointState messages in the bag")
                if len(topics) > 1:
                    raise DataError(f"{where}: several JointState topics ({', '.join(topics)}); choose one with 'topic:' in the profile")
                sel = conns
            for conn, stamp, data in reader.messages(connections=sel):
                msg = reader.deserialize(data, conn.msgtype)
                hs = msg.header.stamp
                msgs.append((stamp, int(hs.sec) * 1_000_000_000 + int(hs.nanosec), list(msg.name),
                             np.asarray(msg.position, float), np.asarray(msg.velocity, float), np.asarray(msg.effort, float)))
    except IdentError:
        raise
    except Exception as exc:  # rosbags raises its own reader errors for broken bags
        raise DataError(f"{where}: cannot read the bag ({first_line(exc)})") from None
    if not msgs:
        raise DataError(f"{where}: the JointState topic has no messages")
    seen = []
    for m_ in msgs:
        for nm in m_[2]:
            if nm not in seen:
                seen.append(nm)
    model, log_names, warns = _joint_map(seen, robot, prof, where)
    n = len(model)
    rows = []
    skipped = 0
    for k, (stamp, hstamp, names, pos, vel, eff) in enumerate(msgs):
        if len(pos) != len(names) or (len(vel) and len(vel) != len(names)) or (len(eff) and len(eff) != len(names)):
            raise DataError(f"{where}: JointState message {k + 1} has {len(names)} names but {len(pos)} positions, {len(vel)} velocities, {len(eff)} efforts")
        idx = {nm: i for i, nm in enumerate(names)}
        if not all(ln in idx for ln in log_names):
            skipped += 1  # another publisher's joints (e.g. a gripper) on the same topic
            continue
        if not len(eff):
            raise DataError(f"{where}: JointState message {k + 1} carries no effort (torque) values")
        sel = [idx[ln] for ln in log_names]
        rows.append((stamp, hstamp, pos[sel], vel[sel] if len(vel) else None, eff[sel]))
    if not rows:
        missing = [ln for ln in log_names if ln not in seen]
        raise DataError(f"{where}: no JointState message carries every joint (never seen: {', '.join(missing) or 'none; they are never together'})")
    if skipped:
        warns.append(f"{where}: skipped {skipped} JointState messages that lack some of the model's joints")
    use_header = prof.time_source == "header" and any(r[1] for r in rows)
    if prof.time_source == "header" and not use_header:
        warns.append(f"{where}: header stamps are all zero; using the bag's record time")
    ns = np.array([r[1] if use_header else r[0] for r in rows], dtype=np.int64)
    t = ns * 1e-9
    q = np.stack([r[2] for r in rows])
    tau = np.stack([r[4] for r in rows])
    has_v = [r[3] is not None for r in rows]
    dq = np.stack([r[3] for r in rows]) if all(has_v) else None
    if any(has_v) and not all(has_v):
        warns.append(f"{where}: velocities missing in some messages; logged velocity not used")
    jt = robot.joint_type if robot is not None else [None] * n
    limit = np.full(n, np.inf) if robot is None else robot.effort_limit.astype(float).copy()
    for ch, arr in (("q", q), ("dq", dq), ("tau", tau)):
        if arr is None:
            continue
        if not np.all(np.isfinite(arr)):
            r, c = np.argwhere(~np.isfinite(arr))[0]
            raise DataError(f"{where}: non-finite {_BAG_FIELDS[ch]} of joint '{log_names[c]}' in message {r + 1}")
        for k in range(n):
            spec = _channel_spec(prof, model[k], ch)
            f = _factor(spec, ch, prof, jt[k], f"{where}: {_BAG_FIELDS[ch]} of '{log_names[k]}'")
            _convert(arr[:, k], spec, f)
            if ch == "tau" and spec.limit is not None:
                limit[k] = spec.limit
    raw = RawLog(where, model, t, q, dq, None, tau, limit, warns)
    _check_times(t, where, "message")
    return raw


def _check_plausible(raw: RawLog, robot) -> None:
    """Catch wrong units or offsets: positions far outside the joint limits are an error; torques
    above the effort limit (clipping detection then off) are a warning, naming a likely unit slip."""
    if robot is None:
        return
    for k, j in enumerate(raw.joint_names):
        lim = raw.limit[k]
        if np.isfinite(lim):
            mx = float(np.max(np.abs(raw.tau[:, k])))
            if mx > lim * (2.0 - CLIP_FRACTION):
                # a few times the rated effort is no real overload: most likely a unit or scale slip
                hint = ": wrong unit or scale (mN m, motor current without gear ratio and torque constant?), set it in a log profile" if 0 < 3.0 * lim < mx else ""
                raw.warnings.append(f"{raw.source}: joint '{j}' torque reaches {mx:.4g} {'N' if robot.joint_type[k] == 1 else 'N m'}, "
                                    f"above its effort limit {lim:.4g}{hint}; clipping detection off for it")
        lo, hi = robot.lower[k], robot.upper[k]
        if not (np.isfinite(lo) and np.isfinite(hi)) or robot.continuous[k]:
            continue
        qk = raw.q[:, k]
        i_max, i_min = int(np.argmax(qk)), int(np.argmin(qk))
        unit = "m" if robot.joint_type[k] == 1 else "rad"
        margin = 0.1 * (hi - lo) + (0.01 if robot.joint_type[k] == 1 else 0.1)
        for i, v in ((i_max, qk[i_max]), (i_min, qk[i_min])):
            if v > hi + margin or v < lo - margin:
                raise DataError(
                    f"{raw.source}: joint '{j}' position {v:.6g} {unit} at data row {i + 1} is far outside its limits "
                    f"[{lo:.4g}, {hi:.4g}] {unit}: wrong unit (deg/mm?), sign or offset? set them in a log profile"
                )
        if qk[i_max] > hi + 1e-3 or qk[i_min] < lo - 1e-3:
            raw.warnings.append(f"{raw.source}: joint '{j}' goes slightly beyond its limits [{lo:.4g}, {hi:.4g}] {unit}")


# =================================================================================================
# Splitting and conditioning
# =================================================================================================


def _uniform_pieces(raw: RawLog, opts: LogOptions, warnings: list[str], counts: dict) -> list[Segment]:
    """Apply windows, split at gaps, resample irregular pieces: raw, uniformly sampled segments."""
    t = raw.t
    idx_sets = []
    if opts.windows:
        t0 = t[0]
        for a, b in opts.windows:
            eps = 1e-9 * max(1.0, abs(b))  # unit conversions (ms -> s) must not move a bound sample out
            sel = np.flatnonzero((t - t0 >= a - eps) & (t - t0 <= b + eps))
            if sel.size < 2:
                warnings.append(f"{raw.source}: window [{a:g}, {b:g}] s holds fewer than 2 samples (file lasts {t[-1] - t0:.6g} s); skipped")
                continue
            idx_sets.append((int(sel[0]), int(sel[-1]) + 1))
        counts["outside_windows"] += raw.t.shape[0] - sum(b - a for a, b in idx_sets)
        if not idx_sets:
            raise DataError(f"{raw.source}: no samples inside the time windows {opts.windows}")
    else:
        idx_sets.append((0, t.shape[0]))
    out = []
    nominal_all = float(np.median(np.diff(t)))
    for a, b in idx_sets:
        d = np.diff(t[a:b])
        gaps = np.flatnonzero(d > opts.max_gap * nominal_all)
        if gaps.size:
            warnings.append(
                f"{raw.source}: {gaps.size} gap(s) longer than {opts.max_gap:g} sample steps (longest {d[gaps].max():.4g} s at t = {t[a + gaps[0]]:.6g} s); data split into segments"
            )
        edges = [a] + [a + int(g) + 1 for g in gaps] + [b]
        for s, e in zip(edges[:-1], edges[1:]):
            if e - s < 2:
                counts["short"] += e - s
                continue
            ts = t[s:e]
            seg = Segment(raw.source, ts, raw.q[s:e], None if raw.dq is None else raw.dq[s:e],
                          None if raw.ddq is None else raw.ddq[s:e], raw.tau[s:e])
            dts = np.diff(ts)
            step = float(np.median(dts))
            dev = float(np.max(np.abs(dts - step))) / step
            if dev > opts.jitter:
                seg = _resample(seg, step)
                warnings.append(
                    f"{raw.source}: irregular sampling (step varies by up to {100 * dev:.3g} % around {step:.6g} s) from t = {ts[0]:.6g} s; resampled to a uniform grid by linear interpolation"
                )
            out.append(seg)
    return out


def _resample(seg: Segment, step: float) -> Segment:
    m = int(np.floor((seg.t[-1] - seg.t[0]) / step + 1e-9)) + 1
    tn = seg.t[0] + step * np.arange(m)

    def rs(x):
        if x is None:
            return None
        return np.stack([np.interp(tn, seg.t, x[:, k]) for k in range(x.shape[1])], axis=1)

    return Segment(seg.source, tn, rs(seg.q), rs(seg.dq), rs(seg.ddq), rs(seg.tau))


def _dilate(mask: np.ndarray, r: int) -> np.ndarray:
    """(m,) bool: true within `r` samples of a true entry of `mask` (running sum, O(m) for any r)."""
    c = np.concatenate([[0], np.cumsum(mask, dtype=np.int64)])
    i = np.arange(mask.shape[0])
    return (c[np.minimum(i + r + 1, mask.shape[0])] - c[np.maximum(i - r, 0)]) > 0


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """[start, end) index runs where `mask` is true."""
    if not mask.any():
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def _condition_segment(seg: Segment, limit: np.ndarray, opts: LogOptions, cutoff: float | None, joint_names, warnings, counts, noise):
    """Filter, differentiate, drop clipped samples and decimate one uniform segment -> list of segments."""
    m, n = seg.q.shape
    dt = float(seg.t[1] - seg.t[0])
    fs = 1.0 / dt
    where = f"{seg.source} (t = {seg.t[0]:.6g}..{seg.t[-1]:.6g} s)"
    if cutoff and cutoff >= 0.5 * fs:
        # a controller logs at tens of Hz or more: a sample step of a second or longer means ms read as s
        hint = f" (a {dt:g} s sample step: time in ms? set time.unit in a log profile)" if dt >= 0.5 else ""
        raise DataError(f"cutoff: {cutoff:g} Hz is not below the Nyquist frequency {0.5 * fs:g} Hz of {where}{hint}")
    if opts.decimate > 1:
        try:  # the low-pass is the anti-alias filter: refuse a factor that would alias
            cond.decimate(seg.t[:1], opts.decimate, fs, cutoff)
        except DataError as exc:
            raise DataError(f"{where}: {exc}") from None
    tau = seg.tau
    # clipped torques: flagged on the raw channel, where the saturation is exact
    clipped = np.zeros(m, dtype=bool)
    if opts.drop_clipped:
        for k in range(n):
            lim = limit[k]
            if np.isfinite(lim):
                a = np.abs(tau[:, k])
                if a.max() <= lim * (2.0 - CLIP_FRACTION):
                    hit = a >= CLIP_FRACTION * lim
                    if hit.any():
                        warnings.append(f"{where}: {int(hit.sum())} sample(s) of joint '{joint_names[k]}' at its torque limit {lim:.4g}: dropped")
                        clipped |= hit
    if opts.delay is not None and np.any(np.asarray(opts.delay) != 0):
        d = np.broadcast_to(np.asarray(opts.delay, float), (n,))
        tau, valid = cond.shift(seg.t, tau, d)
        clipped |= ~valid
        counts["delay_edges"] += int((~valid).sum())
    q, dq_log, ddq_log = seg.q, seg.dq, seg.ddq
    periodic = False
    if opts.period and opts.average:
        L = opts.period * fs
        Li = int(round(L))
        if abs(L - Li) > 1e-3 * max(1.0, L) or Li < 4:
            raise DataError(f"period: {opts.period:g} s is not a whole number of samples at {fs:g} Hz ({L:.6g}); resample or fix the period")
        P = m // Li
        if P < 2:
            warnings.append(f"{where}: shorter than two periods of {opts.period:g} s; segment skipped for period averaging")
            counts["short"] += m
            return []
        keep_blocks = [p for p in range(P) if not clipped[p * Li : (p + 1) * Li].any()]
        if len(keep_blocks) < 2:
            raise DataError(f"{where}: fewer than two periods free of clipped torque; cannot average")
        counts["clipped"] += int(clipped[: P * Li].sum())
        counts["partial_period"] += m - P * Li
        counts["averaged_out"] += (len(keep_blocks) - 1) * Li

        def blocks(x):
            return None if x is None else np.concatenate([x[p * Li : (p + 1) * Li] for p in keep_blocks])

        tau_mean, var_tau, Pk = cond.period_average(blocks(tau), Li)
        q_mean, var_q, _ = cond.period_average(blocks(q), Li)
        spread = np.ptp(q_mean, axis=0)
        bad = [joint_names[k] for k in range(n) if np.sqrt(var_q[k]) > 0.01 * max(spread[k], 1e-9)]
        if bad:
            warnings.append(f"{where}: positions of {', '.join(bad)} differ between periods by more than 1 % of their range: is the period {opts.period:g} s right and the data periodic?")
        noise.append((var_tau, Pk - 1, var_q))
        dq_log = None if dq_log is None else cond.period_average(blocks(dq_log), Li)[0]
        ddq_log = None if ddq_log is None else cond.period_average(blocks(ddq_log), Li)[0]
        q, tau = q_mean, tau_mean
        t = seg.t[0] + dt * np.arange(Li)
        m = Li
        clipped = np.zeros(m, dtype=bool)
        periodic = True
    else:
        t = seg.t
    # edge trimming and clipped neighbourhoods, decided before the heavy work so it runs once per column
    if periodic or not cutoff:
        trim = 0 if periodic else int(round((opts.trim or 0.0) * fs))
    else:
        trim = int(round((opts.trim if opts.trim is not None else 2.0 / cutoff) * fs))
    if not periodic and cutoff and m < max(cond.min_filter_samples(opts.filter_order), 2 * trim + 3):
        warnings.append(f"{where}: only {m} samples, too short to filter; skipped")
        counts["short"] += m
        return []
    keep = np.ones(m, dtype=bool)
    if trim:
        keep[:trim] = False
        keep[m - trim :] = False
        counts["trimmed"] += int(min(m, 2 * trim))
    if clipped.any():
        spread_n = max(trim, 1)
        dil = _dilate(clipped, spread_n)
        counts["clipped"] += int((dil & keep).sum())
        keep &= ~dil
    runs = [(a, b) for a, b in _runs(keep) if b - a >= 3]
    counts["short"] += int(keep.sum()) - sum(b - a for a, b in runs)
    sel = [np.arange(a, b, opts.decimate) for a, b in runs]
    if not sel:
        return []
    counts["decimated"] += sum(b - a for a, b in runs) - sum(len(s) for s in sel)
    allsel = np.concatenate(sel)

    need_dq = not (opts.logged_velocity and dq_log is not None)
    need_ddq = not (opts.logged_acceleration and ddq_log is not None)
    if opts.logged_velocity and dq_log is None:
        raise DataError(f"{seg.source}: logged_velocity is set but the log has no velocity")
    if opts.logged_acceleration and ddq_log is None:
        raise DataError(f"{seg.source}: logged_acceleration is set but the log has no acceleration")
    if (need_dq or need_ddq) and cutoff is None:
        raise DataError(
            "no low-pass cutoff: give cutoff (Hz), or the excitation's max_frequency or period and harmonics, or cutoff 0 for no filtering"
        )
    window = opts.savgol_window or cond.savgol_window(fs, cutoff or 0.25 * fs)
    out = {k: np.empty((allsel.size, n)) for k in ("q", "dq", "ddq", "tau")}
    slow = np.empty((allsel.size, n), dtype=bool)
    if opts.reversal_margin is not None:
        margin = int(round(opts.reversal_margin * fs))
    else:
        margin = int(round(0.25 / cutoff * fs)) if cutoff else 0

    def filt(x):
        return cond.lowpass(x, fs, cutoff, opts.filter_order, periodic=periodic) if cutoff else np.asarray(x, float)

    for k in range(n):  # one joint at a time keeps the temporaries to a few columns
        qf = filt(q[:, k])
        out["q"][:, k] = qf[allsel]
        if need_dq:
            v = cond.derivative(qf, dt, opts.derivative, window, periodic)
        else:
            v = filt(dq_log[:, k])
        out["dq"][:, k] = v[allsel]
        flag = np.abs(v) < opts.slow_velocity
        if margin:
            rev = np.concatenate([np.diff(np.signbit(v).astype(np.int8)) != 0, [False]])
            flag |= _dilate(rev, margin)
        slow[:, k] = flag[allsel]
        if need_ddq:
            a = cond.derivative(v, dt, opts.derivative, window, periodic)
        else:
            a = filt(ddq_log[:, k])
        out["ddq"][:, k] = a[allsel]
        out["tau"][:, k] = filt(tau[:, k])[allsel]
        del qf, v, a
    segs = []
    off = 0
    for s in sel:
        sl = slice(off, off + len(s))
        off += len(s)
        segs.append(Segment(seg.source, t[s], out["q"][sl], out["dq"][sl], out["ddq"][sl], out["tau"][sl], slow[sl]))
    return segs


def read_logs(paths, robot=None, profile=None, options=None) -> Dataset:
    """Read and validate logs without filtering: raw, uniformly sampled segments (dq/ddq may be None).

    Same arguments as :func:`load_dataset`. Useful to inspect what a file holds (``ident logs``).
    """
    return _load(paths, robot, profile, options, condition=False)


def load_dataset(paths, robot=None, profile=None, options=None) -> Dataset:
    """Read, validate and condition logs into identification samples.

    Parameters
    ----------
    paths : a path or a list of paths (CSV, Parquet, ROS 1/2 bags). Each file keeps its own
        segments: nothing is filtered, differentiated or averaged across a file boundary or a gap.
    robot : optional :class:`ident.model.Robot`; joints follow its order and every model joint must
        be in the logs.
    profile : optional log profile (YAML path, dict or :class:`LogProfile`).
    options : optional dict or :class:`LogOptions`; its entries override the profile's
        ``conditioning`` section.

    Returns
    -------
    Dataset with conditioned segments: q (rad or m), dq, ddq, tau (N m or N), each (m, n).
    """
    return _load(paths, robot, profile, options, condition=True)


def _resolve_options(prof: LogProfile, options) -> LogOptions:
    opts = LogOptions.from_mapping(prof.conditioning, f"{prof.source}: conditioning")
    if isinstance(options, LogOptions):
        return opts.updated({f.name: getattr(options, f.name) for f in dataclasses.fields(options)
                             if getattr(options, f.name) != getattr(LogOptions(), f.name)}, "options")
    if options is not None and not isinstance(options, dict):
        raise DataError(f"options: expected a dict or LogOptions, got {type(options).__name__}")
    return opts.updated(options, "options")


def _load(paths, robot, profile, options, condition: bool) -> Dataset:
    prof = load_profile(profile)
    opts = _resolve_options(prof, options)
    if isinstance(paths, (str, Path)):
        paths = [paths]
    paths = list(paths)
    if not paths:
        raise DataError("no log files given")
    cutoff = opts.resolved_cutoff() if condition else None
    warnings: list[str] = []
    counts = dict(read=0, outside_windows=0, short=0, trimmed=0, clipped=0, delay_edges=0, decimated=0, partial_period=0, averaged_out=0)
    segments: list[Segment] = []
    joint_names = None
    files = []
    noise = []
    for path in paths:
        raw = read_log(path, robot, prof)
        if joint_names is None:
            joint_names = raw.joint_names
        elif raw.joint_names != joint_names:
            raise DataError(f"{path}: joints {', '.join(raw.joint_names)} differ from those of {paths[0]} ({', '.join(joint_names)})")
        if opts.delay is not None and np.ndim(opts.delay) == 1 and np.size(opts.delay) != len(joint_names):
            raise DataError(f"delay: {np.size(opts.delay)} values given for {len(joint_names)} joints")
        warnings += raw.warnings
        counts["read"] += raw.t.shape[0]
        pieces = _uniform_pieces(raw, opts, warnings, counts)
        rates = [1.0 / p.dt for p in pieces]
        files.append(dict(path=str(path), samples=int(raw.t.shape[0]), duration=float(raw.t[-1] - raw.t[0]),
                          rate=float(np.median(rates)) if rates else float("nan"), segments=len(pieces),
                          logged=[c for c in CHANNELS if getattr(raw, c) is not None]))
        if not condition:
            segments += pieces
            continue
        for seg in pieces:
            segments += _condition_segment(seg, raw.limit, opts, cutoff, joint_names, warnings, counts, noise)
        del raw, pieces
    if condition and not segments:
        # the CLI shows this one line only, so it names the files and carries the warnings that explain it
        why = "; ".join(w.replace("\n", " ") for w in warnings[:3]) + (f" (and {len(warnings) - 3} more warnings)" if len(warnings) > 3 else "")
        raise DataError(f"{', '.join(str(p) for p in paths)}: no samples left after conditioning ({why or 'check windows, gaps, clipping and segment lengths'})")
    noise_var = None
    info = dict(files=files, counts=counts, conditioned=condition,
                options={k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in dataclasses.asdict(opts).items()},
                cutoff=cutoff, profile=prof.source)
    if noise:
        dof = np.array([d for _, d, _ in noise], float)
        noise_var = sum(v * d for v, d, _ in noise) / dof.sum()
        info["q_noise_var"] = sum(v * d for _, d, v in noise) / dof.sum()
        info["periods_averaged"] = int(dof.sum() + len(noise))
    return Dataset(list(joint_names), segments, warnings, noise_var, info)


def apply_delay(dataset: Dataset, delay) -> Dataset:
    """A copy of `dataset` with the torque-channel delay removed (tau(t) <- tau(t + delay)).

    `delay` is a scalar or (n,) in s, e.g. from :func:`estimate_dataset_delay`. Samples whose
    shifted time falls outside their segment are dropped.
    """
    d = np.broadcast_to(np.asarray(delay, dtype=float), (dataset.n,))
    if not np.all(np.isfinite(d)):
        raise DataError("delay: non-finite value")
    segs = []
    dropped = 0
    for s in dataset.segments:
        tau, valid = cond.shift(s.t, s.tau, d)
        dropped += int((~valid).sum())
        if valid.sum() < 3:
            continue
        sl = lambda x: None if x is None else x[valid]  # noqa: E731
        segs.append(Segment(s.source, s.t[valid], s.q[valid], sl(s.dq), sl(s.ddq), tau[valid], sl(s.slow)))
    info = dict(dataset.info)
    info["delay_applied"] = d.tolist()
    info["delay_dropped"] = dropped
    return Dataset(dataset.joint_names, segs, list(dataset.warnings), dataset.noise_var, info)


def estimate_dataset_delay(dataset: Dataset, predicted: np.ndarray, max_delay: float = 0.05) -> np.ndarray:
    """Per-joint torque delay (s) of `dataset` against a preliminary fit's prediction (N, n).

    Correlates segment by segment (see :func:`ident.conditioning.estimate_delay`); all segments
    must share one sample step.
    """
    steps = np.array([s.dt for s in dataset.segments if s.n_samples > 1])
    if steps.size == 0:
        raise DataError("estimate delay: no segment with two samples")
    if np.ptp(steps) > 1e-6 * steps.max():
        raise DataError("estimate delay: segments have different sample steps; load them separately")
    return cond.estimate_delay([s.tau for s in dataset.segments], dataset.split(predicted), float(steps[0]), max_delay)


def preliminary_delay(dataset: Dataset, robot, terms=("fv", "fc", "ia"), max_delay: float = 0.05, max_rows: int = 50_000, sweeps: int = 3) -> np.ndarray:
    """Per-joint torque delay (s) of `dataset` by a profiled least-squares search against a
    preliminary fit's prediction.

    For each candidate delay the measured torque is shifted and the preliminary OLS fit on the base
    regressor is redone (cheaply, through one QR factorization of the regressor); the delay is the
    one whose fit leaves the smallest residual, refined between samples by a parabola. Equivalently
    it maximizes the correlation between the shifted torque and the torque its own fit predicts.
    Correlating once against a fit made on the delayed data (:func:`estimate_dataset_delay` with
    that prediction) would under-estimate the delay, because the fit absorbs part of it into its
    parameters. Joints are solved one at a time in a few sweeps (they share the parameters).

    Parameters
    ----------
    dataset : conditioned samples; every segment must share one sample step.
    robot : the model (joints in the data set's order).
    terms : joint terms of the preliminary fit; with "fc", samples flagged slow are left out.
        Keep "ia" for geared arms: without the rotor-inertia column a shifted viscous column
        (fv q'(t + d) ~ fv q' + fv d q'') stands in for it, and the "delay" found is that stand-in.
    max_delay : largest |delay| searched, s.
    max_rows : at most this many samples (evenly spread) enter the fit.

    Returns
    -------
    (n,) delay, s (positive: the torque channel lags the positions); remove it with
    :func:`apply_delay` or the ``delay`` option of :func:`load_dataset`.
    """
    from .compress import single_thread_blas

    with single_thread_blas():  # narrow products: BLAS threads only add synchronisation
        return _preliminary_delay(dataset, robot, terms, max_delay, max_rows, sweeps)


def _preliminary_delay(dataset, robot, terms, max_delay, max_rows, sweeps):
    from .base import base_parameters
    from .model import parse_terms
    from .regressor import regressor

    terms = parse_terms(terms)
    if list(robot.joint_names) != list(dataset.joint_names):
        raise DataError(f"preliminary delay: the data's joints ({', '.join(dataset.joint_names)}) are not the model's ({', '.join(robot.joint_names)})")
    if dataset.dq is None or dataset.ddq is None:
        raise DataError("preliminary delay: the data set has no velocities/accelerations (load it with load_dataset)")
    steps = np.array([s.dt for s in dataset.segments if s.n_samples > 1])
    if steps.size == 0 or np.ptp(steps) > 1e-6 * steps.max():
        raise DataError("preliminary delay: segments must share one sample step")
    dt = float(steps[0])
    K = max(1, int(np.ceil(max_delay / dt)))
    # rows far enough inside their segment that every shift stays inside it
    rows = [np.arange(sl.start + K + 1, sl.stop - K - 1) for sl in dataset.segment_slices() if sl.stop - sl.start > 2 * K + 12]
    g = np.concatenate(rows) if rows else np.zeros(0, dtype=int)
    if g.size > max_rows:
        g = g[np.linspace(0, g.size - 1, max_rows).round().astype(int)]
    bp = base_parameters(robot, terms)
    if g.size * robot.n < 2 * bp.n_base:
        raise NumericalError(f"preliminary delay: too few samples ({g.size}) for a fit of {bp.n_base} base parameters over +-{max_delay:g} s shifts")
    Yb = bp.columns(regressor(robot, dataset.q[g], dataset.dq[g], dataset.ddq[g], terms))  # (R, n, b)
    use = np.ones((g.size, robot.n))
    if "fc" in terms and dataset.slow is not None:
        use = (~dataset.slow[g]).astype(float)  # sign(q') is unreliable there
    Yb *= use[:, :, None]
    R_, n, b = Yb.shape
    A = Yb.reshape(R_ * n, b)
    scale = np.linalg.norm(A, axis=0)
    scale[scale == 0] = 1.0
    A = A / scale
    # orthonormal basis of the regressor's range, Q = A L^-T from the Cholesky factor of A^T A:
    # squaring the condition number is harmless for a preliminary fit on scaled columns, and it
    # is much cheaper than a QR of the tall matrix
    G = A.T @ A
    ev = np.linalg.eigvalsh(G)
    if ev[0] <= 1e-12 * ev[-1]:
        raise NumericalError("preliminary delay: the data do not excite every base parameter (rank-deficient regressor); use richer motion or fewer terms")
    Lc = np.linalg.cholesky(G)
    Q = np.linalg.solve(Lc, A.T).T.reshape(R_, n, b)
    tau = dataset.tau
    lags = np.arange(-K, K + 1)
    d = np.zeros(n)  # samples

    def shifted(j, x):
        fl = int(np.floor(x))
        fr = x - fl
        return ((1 - fr) * tau[g + fl, j] + fr * tau[g + fl + 1, j]) * use[:, j]

    cur = np.stack([shifted(j, 0.0) for j in range(n)], 1)
    proj = np.einsum("rjb,rj->b", Q, cur)
    for _ in range(max(1, int(sweeps))):
        moved = 0.0
        for j in range(n):
            rest = proj - Q[:, j, :].T @ cur[:, j]
            T = tau[g[None, :] + lags[:, None], j] * use[:, j]  # (2K+1, R): torque shifted by each lag
            V = rest + T @ Q[:, j, :]
            rss = (T * T).sum(1) - (V * V).sum(1)  # + a constant of the other joints
            i = int(np.argmin(rss))
            frac = 0.0
            if 0 < i < 2 * K:
                den = rss[i - 1] - 2 * rss[i] + rss[i + 1]
                if den > 0:
                    frac = 0.5 * (rss[i - 1] - rss[i + 1]) / den
            new = float(np.clip(lags[i] + frac, -K, K - 1e-9))
            moved = max(moved, abs(new - d[j]))
            d[j] = new
            cur[:, j] = shifted(j, new)
            proj = rest + Q[:, j, :].T @ cur[:, j]
        if moved < 0.01:
            break
    return d * dt


def write_samples(path, dataset: Dataset) -> None:
    """Write conditioned samples in the default table convention (CSV or Parquet by suffix), atomically.

    Columns: ``segment`` (1-based), ``time`` (s), then per joint ``<joint>.q``, ``.dq``, ``.ddq``,
    ``.tau`` (SI). Reading the file back splits it at segment boundaries (time gaps).
    """
    import pandas as pd

    from .fileio import atomic_path

    p = Path(path)
    kind = TABLE_SUFFIXES.get(p.suffix.lower())
    if kind is None:
        raise DataError(f"{p}: samples are written as .csv or .parquet, not '{p.suffix}'")
    if dataset.n_samples == 0:
        raise DataError(f"{p}: no samples to write")
    cols = {"segment": np.concatenate([np.full(s.n_samples, k + 1) for k, s in enumerate(dataset.segments)]), "time": dataset.t}
    for ch in CHANNELS:
        a = getattr(dataset, ch)
        if a is None:
            continue
        for k, j in enumerate(dataset.joint_names):
            cols[f"{j}.{ch}"] = a[:, k]
    frame = pd.DataFrame(cols)
    with atomic_path(p) as tmp:
        if kind == "csv":
            frame.to_csv(tmp, index=False, float_format="%.17g")
        else:
            frame.to_parquet(tmp, index=False)


def describe(dataset: Dataset) -> dict:
    """A JSON-friendly summary: joints, per-file rate/duration/segments, sample counts, warnings."""
    segs = dataset.segments
    return dict(
        joints=list(dataset.joint_names),
        samples=dataset.n_samples,
        segments=[dict(source=s.source, start=float(s.t[0]), end=float(s.t[-1]), samples=s.n_samples,
                       rate=(1.0 / s.dt if s.n_samples > 1 else None)) for s in segs],
        files=dataset.info.get("files", []),
        dropped={k: v for k, v in dataset.info.get("counts", {}).items() if k != "read"},
        ranges=_ranges(dataset),
        noise_var=None if dataset.noise_var is None else dataset.noise_var.tolist(),
        cutoff=dataset.info.get("cutoff"),
        conditioned=dataset.info.get("conditioned"),
        warnings=list(dataset.warnings),
    )


def _ranges(dataset: Dataset) -> dict:
    """Per joint and channel: [min, max] over the samples (SI), to spot unit or sign mistakes."""
    out = {}
    for ch in CHANNELS:
        parts = [getattr(s, ch) for s in dataset.segments]
        if not parts or any(p is None for p in parts):
            continue
        lo = np.min([p.min(axis=0) for p in parts], axis=0)
        hi = np.max([p.max(axis=0) for p in parts], axis=0)
        out[ch] = {j: [float(lo[k]), float(hi[k])] for k, j in enumerate(dataset.joint_names)}
    return out


