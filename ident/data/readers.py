"""Reading one log file, whatever its kind: dispatch by suffix (or profile) to the table or bag reader.

Nothing is repaired silently: malformed input raises :class:`ident.errors.DataError` naming the
file, column and row.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import DataError
from .bags import BAG_SUFFIXES, read_bag
from .checks import check_plausible
from .profile import LogProfile, load_profile
from .rawlog import RawLog
from .tables import TABLE_SUFFIXES, read_table


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
    robot : optional :class:`ident.arm.model.Robot`; joints are then put in its order, its joint types
        check the units and its limits catch implausible values.
    profile : optional profile (path, dict or :class:`LogProfile`).
    """
    prof = load_profile(profile)
    p = Path(path)
    if not p.exists():
        raise DataError(f"{p}: log file not found")
    fmt = log_format(p, prof)
    if fmt == "bag":
        raw = read_bag(p, robot, prof)
    else:
        raw = read_table(p, fmt, robot, prof)
    check_plausible(raw, robot)
    return raw
