"""Checked values of the excitation config: numbers, fractions, counts and per-joint lists, each error naming its key.
"""

from __future__ import annotations

import numpy as np

from ..arm.model import Robot
from ..errors import IdentError
from ..intake import number, shown


def period_ticks(period: float, rate: float, key: str) -> int:
    ticks = period * rate
    if abs(ticks - round(ticks)) > 1e-6 * max(1.0, ticks) or round(ticks) < 1:
        raise IdentError(f"{key}: the period {period:g} s is not a whole number of controller ticks at {rate:g} Hz")
    return int(round(ticks))


def known_keys(d: dict, known: set, where: str) -> None:
    for key in d:
        if key not in known:
            raise IdentError(f"{where}: unknown setting '{key}' (known: {', '.join(sorted(known))})")


def finite_number(v, key: str) -> float:
    if isinstance(v, bool) or v is None:
        raise IdentError(f"{key}: expected a number, got {shown(v)}")
    if not isinstance(v, (int, float)):
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise IdentError(f"{key}: expected a number, got {shown(v)}") from None
    return number(v, key, "parameter")


def positive_number(v, key: str) -> float:
    x = finite_number(v, key)
    if x <= 0:
        raise IdentError(f"{key}: must be positive, got {shown(v)}")
    return x


def nonneg_number(v, key: str) -> float:
    x = finite_number(v, key)
    if x < 0:
        raise IdentError(f"{key}: must not be negative, got {shown(v)}")
    return x


def fraction_number(v, key: str) -> float:
    x = positive_number(v, key)
    if x > 1:
        raise IdentError(f"{key}: a fraction of the description's limit must be in (0, 1], got {shown(v)}")
    return x


def whole_number(v, key: str, minimum: int) -> int:
    if not isinstance(v, int) or isinstance(v, bool) or v < minimum:
        raise IdentError(f"{key}: expected an integer >= {minimum}, got {shown(v)}")
    return v


def float_list(v, key: str, size: int) -> np.ndarray:
    if not isinstance(v, (list, tuple)) or len(v) != size:
        raise IdentError(f"{key}: expected a list of {size} numbers, got {shown(v)}")
    return np.array([finite_number(x, key) for x in v])


def per_joint_values(robot: Robot, v, key: str, positive: bool = False, nonneg: bool = False, partial: np.ndarray | None = None) -> np.ndarray:
    """Scalar (every joint), list of n values (robot order) or {joint: value}.

    A mapping must name every joint unless `partial` gives the values of the joints it leaves out.
    """
    n = robot.n
    if isinstance(v, dict):
        out = np.full(n, np.nan) if partial is None else np.array(partial, dtype=float)
        for name, x in v.items():
            out[robot_index(robot, name, key)] = finite_number(x, f"{key}.{name}")
        if partial is None and np.any(np.isnan(out)):
            missing = [robot.joint_names[j] for j in np.flatnonzero(np.isnan(out))]
            raise IdentError(f"{key}: missing joint(s) {', '.join(missing)}")
    elif isinstance(v, (list, tuple)):
        if len(v) != n:
            raise IdentError(f"{key}: expected {n} values (joints {', '.join(robot.joint_names)}), got {len(v)}")
        out = np.array([finite_number(x, f"{key}[{i}]") for i, x in enumerate(v)])
    else:
        out = np.full(n, finite_number(v, key))
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
