"""One file's samples in SI units after validation, and the per-channel mapping shared by the readers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import DataError
from ..intake import MAGNITUDE
from .profile import UNITS, ChannelSpec, LogProfile


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


def joint_map(available_names: list[str], robot, prof: LogProfile, where: str):
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


def channel_spec(prof: LogProfile, joint: str, ch: str) -> ChannelSpec:
    if joint in prof.joints:
        return prof.joints[joint][1][ch]
    return ChannelSpec()


def channel_factor(spec: ChannelSpec, ch: str, prof: LogProfile, jtype: int | None, where: str) -> float:
    unit = spec.unit or prof.units.get(ch)
    if unit is None:
        return 1.0
    scale, kind = UNITS[ch][unit]
    if jtype is not None and kind and kind != ("p" if jtype == 1 else "r"):
        jk = "prismatic" if jtype == 1 else "revolute"
        raise DataError(f"{where}: unit '{unit}' does not fit a {jk} joint")
    if unit == "A":
        if spec.gear_ratio is None or spec.torque_constant is None:
            raise DataError(f"{where}: a motor current (unit A) needs gear_ratio and torque_constant in the profile")
        scale = spec.gear_ratio * spec.torque_constant
    return scale


def convert_channel(x: np.ndarray, spec: ChannelSpec, factor: float) -> None:
    """In place: x <- sign * factor * (x + offset)."""
    if spec.offset:
        x += spec.offset
    s = spec.sign * factor
    if s != 1.0:
        x *= s


#: the ident.intake magnitude bound of each channel, after conversion to SI
CHANNEL_QUANTITY = {"q": "position", "dq": "velocity", "ddq": "acceleration", "tau": "torque"}


def check_magnitude(x: np.ndarray, ch: str, where: str, unit: str, offset: int = 0) -> None:
    """Refuse a channel (in SI) holding a value beyond the sane magnitude of its quantity, which
    would overflow the squares and products of the fit (row or message named)."""
    limit, si = MAGNITUDE[CHANNEL_QUANTITY[ch]]
    with np.errstate(invalid="ignore"):
        bad = np.flatnonzero(np.abs(x) > limit)
    if bad.size:
        k = int(bad[0])
        raise DataError(f"{where}: {x[k]:g} at data {unit} {offset + k + 1} is beyond any sane {CHANNEL_QUANTITY[ch]} (|value| <= {limit:g} {si})")


def check_times(t: np.ndarray, where: str, unit: str, offset: int = 0) -> None:
    """Times (m,) must increase; `offset`: data rows before t[0] (for a block of a longer log)."""
    if t.shape[0] < 2:
        raise DataError(f"{where}: only {t.shape[0]} sample(s); need a time series")
    d = np.diff(t)
    bad = np.flatnonzero(d <= 0)
    if bad.size:
        k = int(bad[0]) + 1
        what = "duplicate" if d[bad[0]] == 0 else "decreasing (non-monotonic)"
        raise DataError(f"{where}: {what} timestamp at data {unit} {offset + k + 1} (t = {t[k]:.9g} s after {t[k - 1]:.9g} s)")
