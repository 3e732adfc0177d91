"""Which logs belong to which arm and period: the fleet catalog.

A catalog is a table (CSV or Parquet), one row a log, with the columns of :data:`COLUMNS`
(:data:`OPTIONAL` may be absent or empty):

* ``arm`` : the arm's id (any text without a path separator);
* ``time`` : when the log was taken, a date (``2026-03-05``) or a timestamp (ISO 8601);
* ``log`` : the log's path (relative paths are relative to the catalog's folder) or URL, as the
  workers see it;
* ``description`` : the arm's description (URDF or DH file; relative as ``log``);
* ``profile`` : optional log profile (YAML) of that log;
* ``excitation`` : optional excitation file of the motion (``coefficients.yaml`` from
  ``ident excite``), which gives the period and harmonics to the conditioning.

Instead of a table, a folder pattern with the placeholders ``{arm}`` and ``{date}`` (e.g.
``logs/{arm}/{date}.parquet``) lists the matching files; every arm then shares one description.

Periods (:func:`period_of`, option ``--per``): ``day``, ``week`` (ISO weeks, Monday first) or ``month``. The logs of
one arm in one period are fitted together, in time order (then path order).
"""

from __future__ import annotations

import glob
import re
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import DataError, IdentError

COLUMNS = ("arm", "time", "log", "description")
OPTIONAL = ("profile", "excitation")
PERIODS = ("day", "week", "month")


@dataclass(frozen=True)
class LogEntry:
    """One catalog row: arm id, time (pandas Timestamp), log path or URL, description path,
    optional profile and excitation paths, and the row's place for messages."""

    arm: str
    time: pd.Timestamp
    log: str
    description: str
    profile: str | None = None
    excitation: str | None = None
    where: str = ""


def _is_url(text: str) -> bool:
    return bool(re.match(r"^[a-z][a-z0-9+.-]*://", text, re.IGNORECASE))


def _resolve(text: str, folder: Path) -> str:
    if _is_url(text) or Path(text).is_absolute():
        return text
    return str(folder / text)


def read_catalog(path) -> list[LogEntry]:
    """Read a catalog table (CSV or Parquet) into :class:`LogEntry` records, in file order."""
    p = Path(path)
    if not p.is_file():
        raise DataError(f"{p}: catalog not found")
    try:
        df = pd.read_parquet(p) if p.suffix.lower() in (".parquet", ".pq") else pd.read_csv(p, dtype=str, keep_default_na=False)
    except Exception as exc:  # noqa: BLE001 - pandas raises many kinds for a bad table
        raise DataError(f"{p}: cannot read the catalog ({' '.join(str(exc).split())[:200]})") from None
    missing = [c for c in COLUMNS if c not in df.columns]
    if missing:
        raise DataError(f"{p}: catalog has no column {', '.join(repr(c) for c in missing)} (needs {', '.join(COLUMNS)}; optional {', '.join(OPTIONAL)})")
    if df.shape[0] == 0:
        raise DataError(f"{p}: catalog has no rows")
    out = []
    for k, row in enumerate(df.to_dict("records")):
        where = f"{p}: row {k + 2}"  # header is line 1
        vals = {c: ("" if row.get(c) is None or (isinstance(row.get(c), float) and pd.isna(row.get(c))) else str(row.get(c)).strip())
                for c in (*COLUMNS, *OPTIONAL)}
        for c in COLUMNS:
            if not vals[c]:
                raise DataError(f"{where}: empty '{c}'")
        if "/" in vals["arm"] or "\\" in vals["arm"]:
            raise DataError(f"{where}: arm id '{vals['arm']}' must not hold a path separator")
        out.append(LogEntry(vals["arm"], _time(vals["time"], where), _resolve(vals["log"], p.parent),
                            _resolve(vals["description"], p.parent),
                            _resolve(vals["profile"], p.parent) if vals["profile"] else None,
                            _resolve(vals["excitation"], p.parent) if vals["excitation"] else None, where))
    return out


def _time(text: str, where: str) -> pd.Timestamp:
    try:
        ts = pd.Timestamp(text)
    except (ValueError, TypeError):
        ts = None
    if ts is None or pd.isna(ts):
        raise DataError(f"{where}: time '{text}' is not a date or timestamp (e.g. 2026-03-05 or 2026-03-05T14:30:00)")
    return ts.tz_convert(None) if ts.tzinfo is not None else ts


def catalog_from_pattern(pattern: str, description: str, profile: str | None = None, excitation: str | None = None) -> list[LogEntry]:
    """The logs matching a folder pattern with ``{arm}`` and ``{date}`` placeholders, one
    :class:`LogEntry` each (every arm with the same description, profile and excitation)."""
    if "{arm}" not in pattern or "{date}" not in pattern:
        raise IdentError(f"pattern '{pattern}': needs both placeholders {{arm}} and {{date}}")
    if not description:
        raise IdentError("--description: a folder pattern needs the arms' description file")
    glob_pat = glob.escape(pattern).replace(glob.escape("{arm}"), "*").replace(glob.escape("{date}"), "*")
    parts = re.split(r"(\{arm\}|\{date\})", pattern)
    rx = "".join({"{arm}": r"(?P<arm>[^/\\]+)", "{date}": r"(?P<date>[^/\\]+?)"}.get(s, re.escape(s)) for s in parts if s)
    rx = re.compile(rx.replace("(?P<arm>", "(?P<arm>", 1) + "$")
    out = []
    for f in sorted(glob.glob(glob_pat)):
        m = rx.match(f)
        if not m:
            continue
        out.append(LogEntry(m.group("arm"), _time(m.group("date"), f), f, description, profile, excitation, f))
    if not out:
        raise DataError(f"pattern '{pattern}': no files match")
    return out


def period_of(ts: pd.Timestamp, period: str) -> tuple[str, pd.Timestamp]:
    """(label, first day) of the period holding `ts`: ``2026-03-05`` (day), ``2026-W10`` (ISO week,
    from Monday), ``2026-03`` (month)."""
    day = pd.Timestamp(ts.date())
    if period == "day":
        return day.strftime("%Y-%m-%d"), day
    if period == "week":
        iso = day.isocalendar()
        return f"{iso[0]:04d}-W{iso[1]:02d}", day - pd.Timedelta(days=int(iso[2]) - 1)
    if period == "month":
        return day.strftime("%Y-%m"), pd.Timestamp(year=day.year, month=day.month, day=1)
    raise IdentError(f"--per: '{period}' is not one of {', '.join(PERIODS)}")


@dataclass
class Group:
    """The logs of one arm in one period, in time order: arm, description, period label and first day."""

    arm: str
    description: str
    period: str
    start: pd.Timestamp
    entries: list[LogEntry]


def group_logs(entries: list[LogEntry], period: str) -> list[Group]:
    """Group catalog entries per arm and period, sorted by arm then period (logs by time, then path).

    An arm must keep one description throughout (a changed description is a different arm).
    """
    if period not in PERIODS:
        raise IdentError(f"--per: '{period}' is not one of {', '.join(PERIODS)}")
    desc: dict[str, LogEntry] = {}
    groups: dict[tuple[str, str], Group] = {}
    for e in entries:
        first = desc.setdefault(e.arm, e)
        if first.description != e.description:
            raise DataError(f"{e.where}: arm '{e.arm}' has description {e.description}, but {first.where} gives {first.description}")
        label, start = period_of(e.time, period)
        g = groups.setdefault((e.arm, label), Group(e.arm, e.description, label, start, []))
        g.entries.append(e)
    for g in groups.values():
        g.entries.sort(key=lambda e: (e.time, e.log))
        seen = set()
        for e in g.entries:
            if e.log in seen:
                raise DataError(f"{e.where}: log {e.log} is listed twice for arm '{e.arm}'")
            seen.add(e.log)
    return sorted(groups.values(), key=lambda g: (g.arm, g.start))


def check_local_files(entries: list[LogEntry]) -> None:
    """Refuse entries whose description, profile, excitation or log file is missing here (for runs
    whose workers share this machine's files)."""
    for e in entries:
        for what, f in (("description", e.description), ("profile", e.profile), ("excitation", e.excitation), ("log", e.log)):
            if f and not _is_url(f) and not Path(f).exists():
                raise DataError(f"{e.where}: {what} file {f} not found")
