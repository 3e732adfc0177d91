"""How raw logs become identification samples: the conditioning settings, validated.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import DataError
from ..fileio import read_yaml
from ..intake import MAX_SAMPLES, count, number, shown
from . import conditioning as cond


@dataclass
class LogOptions:
    """How raw logs become identification samples (every field has a CLI option, see
    :func:`add_log_arguments`, and a key of the same name in a profile's ``conditioning`` section).

    cutoff : low-pass cutoff, Hz; None = chosen from the data (:func:`ident.data.conditioning.cutoff_from_data`:
        99 % of the positions' acceleration power above their noise; at least 5x the highest
        excited frequency when that is known); 0 = no filtering.
    max_frequency : highest excited frequency, Hz (or derived from ``period`` and ``harmonics``).
    period : excitation period, s. Gives the per-joint torque noise variance from the spread
        between whole periods (the first period, which holds the closed loop's start-up, left out).
    average : also replace the samples of each segment by their average over whole periods.
        Off by default: averaging is consistent only for motion that repeats exactly, and the
        dry-friction steps of periods whose reversals differ by a few samples average into a
        shape no friction law has (measured on closed-loop simulations: Coulomb and viscous
        estimates 3-8 % off with it, within 2 % without).
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
    slow_velocity : |dq| threshold (rad/s or m/s) below which samples are flagged ``slow``;
        None (default) = per joint from the data, the largest of: 3 standard deviations of the
        noise of the velocity that decides the sign of dry friction; the speed the joint passes
        within a quarter cutoff period of a reversal (median |q''| at its reversals / (4 cutoff)),
        where the low-pass cannot resolve stick-slip; 1e-3 of its RMS velocity.
    reversal_margin : also flag as ``slow`` the samples within this many seconds of a velocity
        reversal (s); None (default) = none: the dry-friction columns are filtered like the torque
        (``Segment.dry``), so a reversal no longer biases the fit.
    parallel_friction : filter the dry-friction columns like the torque (default; ``Segment.dry``).
        False evaluates sign(q') on the filtered velocity, which mismatches the filtered torque at
        every reversal (kept for comparisons).
    stuck_time : a joint counts as stuck where it stays inside its slow zone for at least this long
        (s); its equations there leave the fit (``Segment.stuck``). None = max(0.1 s, 5 cutoff periods).
    drop_clipped : drop samples where a torque sits at its saturation level (robot effort limit or
        the profile's ``limit``); neighbours within the filter support go too.
    """

    cutoff: float | None = None
    max_frequency: float | None = None
    period: float | None = None
    harmonics: int | None = None
    average: bool = False
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
    slow_velocity: float | None = None
    reversal_margin: float | None = None
    stuck_time: float | None = None
    parallel_friction: bool = True
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
        """The cutoff given (Hz), 0 for none, or None when it is to be chosen from the data."""
        if self.cutoff is not None:
            return float(self.cutoff)
        return None

    def highest_frequency(self) -> float | None:
        """Highest excited frequency (Hz) when known from ``max_frequency`` or ``period`` and ``harmonics``."""
        if self.max_frequency:
            return float(self.max_frequency)
        if self.period and self.harmonics:
            return float(self.harmonics) / float(self.period)
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
        raise DataError(f"{where}: '{key}' {what}, got {shown(val)}")

    if key in ("average", "logged_velocity", "logged_acceleration", "drop_clipped", "parallel_friction"):
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
        top, why = _COUNT_LIMITS[key]
        return count(int(val), f"{where}: '{key}'", 1, top, DataError, why)
    if key == "windows":
        return _parse_windows(val, f"{where}: 'windows'")
    if key == "delay":
        arr = np.asarray(val, dtype=float) if _is_number_list(val) else None
        if arr is None or arr.ndim > 1 or not np.all(np.isfinite(arr)):
            bad("must be a number of seconds or a list of them, one per joint")
        return float(arr) if arr.ndim == 0 else arr
    if isinstance(val, bool) or not isinstance(val, (int, float, np.number)) or not math.isfinite(val):
        bad("must be a finite number")
    val = number(float(val), f"{where}: '{key}'", _QUANTITY.get(key, "scale"), DataError)
    if key in ("cutoff", "trim", "slow_velocity", "reversal_margin", "stuck_time") and val < 0:
        bad("must not be negative")
    if key in ("max_frequency", "period", "max_gap", "jitter") and val <= 0:
        bad("must be positive")
    return val


#: bounds of the numeric options (ident.intake magnitudes) and of the counts, with their reason
_QUANTITY = {"cutoff": "rate", "max_frequency": "rate", "period": "time", "trim": "time", "jitter": "scale",
             "reversal_margin": "time", "slow_velocity": "velocity", "max_gap": "scale", "stuck_time": "time"}
_COUNT_LIMITS = {
    "filter_order": (16, "Butterworth filters above order 16 are numerically unusable (common practice)"),
    "decimate": (MAX_SAMPLES, "the sample-count limit"),
    "harmonics": (10_000, "far above any excitation (common practice: 3 to 20)"),
    "savgol_window": (MAX_SAMPLES, "the sample-count limit"),
}


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
            raise DataError(f"{where}: window {shown(w)} is not a [start, end] pair of numbers")
        a, b = float(w[0]), float(w[1])
        if not (math.isfinite(a) and math.isfinite(b) and b > a):
            raise DataError(f"{where}: window [{a}, {b}] must have finite start < end")
        out.append((a, b))
    return out
