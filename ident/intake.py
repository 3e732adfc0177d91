"""Taking numbers in from files and options: finite, within sane magnitudes, the place named.

Every reader (URDF, DH file, parameter file, log profile, excitation config, logs) passes the
numbers it reads through :func:`number` (or :func:`text_number` for XML attributes and CSV text),
so a value like 1e308 or an integer of 400 digits is refused with the file and key named before
it can overflow a product or a sum downstream. The limits are generous on purpose: they are far
beyond any real arm (the heaviest industrial arms weigh a few tonnes, from memory) and far below
the point where float64 arithmetic on them overflows (squares and products of three stay below
1e308).

Size-like settings (rates, periods, sample counts, substeps) are bounded by :data:`MAX_SAMPLES`
and :data:`MAX_STEPS`, derived from memory and time so an accepted value cannot exhaust either.
"""

from __future__ import annotations

import math

from .errors import IdentError

#: quantity -> (largest accepted magnitude, unit). Generous sanity bounds (from memory: the
#: largest industrial arms reach ~4 m and carry ~2 t; motors spin below ~2000 rad/s; torques stay
#: below ~1e5 N m); each bound is >= 100x a real arm and keeps products of three values finite.
MAGNITUDE: dict[str, tuple[float, str]] = {
    "mass": (1e6, "kg"),
    "length": (1e4, "m"),
    "first_moment": (1e8, "kg m"),
    "inertia": (1e10, "kg m^2"),
    "angle": (1e5, "rad"),
    "position": (1e5, "rad or m"),
    "velocity": (1e6, "rad/s or m/s"),
    "acceleration": (1e8, "rad/s^2 or m/s^2"),
    "torque": (1e9, "N m or N"),
    "current": (1e6, "A"),
    "gravity": (1e4, "m/s^2"),
    "friction": (1e9, "N m s/rad or N m"),
    "time": (1e12, "s"),
    "rate": (1e6, "Hz"),
    "scale": (1e12, ""),
    "parameter": (1e12, "SI"),
}

#: Largest number of samples a command may hold in memory at once. From memory: a sample of a
#: 7-joint arm in the working arrays (q, dq, ddq, tau, regressor chunks) costs about 1 kB, and
#: 5e7 samples (14 h at 1 kHz) is ~50 GB streamed, but the dense per-sample arrays of the design
#: grid and the simulator (~300 B/sample) need 2e7 samples = 6 GB: that is the bound.
MAX_SAMPLES = 20_000_000

#: Largest number of integration steps of one simulation (about 1 us a step on this machine,
#: so 2e8 steps is a few minutes; more is a hang to the user).
MAX_STEPS = 200_000_000

#: Largest nesting depth of a YAML file (the deepest real file has fewer than 10 levels).
MAX_YAML_DEPTH = 64


def number(value, where: str, quantity: str | None = None, error: type[IdentError] = IdentError,
           allow_inf: bool = False) -> float:
    """`value` (a YAML/JSON scalar) as a float, refused with `where` named when it is not a
    finite number or its magnitude exceeds the bound of `quantity` (a key of :data:`MAGNITUDE`).

    `allow_inf` accepts +-inf (meaning "no limit") but never NaN.
    """
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise error(f"{where}: expected a number, got {shown(value)}")
    try:
        x = float(value)
    except OverflowError:
        raise error(f"{where}: an integer of {value.bit_length()} bits is too large for a number") from None
    if math.isnan(x) or (math.isinf(x) and not allow_inf):
        raise error(f"{where}: expected a finite number, got {x!r}")
    if quantity is not None and math.isfinite(x):
        limit, unit = MAGNITUDE[quantity]
        if abs(x) > limit:
            raise error(f"{where}: {x:g} is beyond any sane {quantity.replace('_', ' ')} (|value| <= {limit:g} {unit})".rstrip())
    return x


def text_number(text, where: str, quantity: str | None = None, error: type[IdentError] = IdentError,
                allow_inf: bool = False) -> float:
    """:func:`number` for a number written as text (an XML attribute, a CSV cell, an option)."""
    try:
        value = float(str(text).strip())
    except ValueError:
        raise error(f"{where}: '{shown(text, quotes=False)}' is not a number") from None
    return number(value, where, quantity, error, allow_inf)


def count(value, where: str, minimum: int = 0, maximum: int | None = None, error: type[IdentError] = IdentError,
          limit_name: str = "") -> int:
    """`value` as an integer in [minimum, maximum]; `limit_name` says where `maximum` comes from."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise error(f"{where}: expected an integer >= {minimum}, got {shown(value)}")
    if value < minimum:
        raise error(f"{where}: expected an integer >= {minimum}, got {value}")
    if maximum is not None and value > maximum:
        why = f" ({limit_name})" if limit_name else ""
        raise error(f"{where}: {value} is above the limit {maximum}{why}")
    return value


def check_samples(n: float, where: str, error: type[IdentError] = IdentError) -> int:
    """Refuse a sample count above :data:`MAX_SAMPLES` (memory), naming `where`."""
    if not n <= MAX_SAMPLES:
        raise error(f"{where}: {n:.3g} samples exceed the memory limit of {MAX_SAMPLES:.0e} samples")
    return int(n)


def check_steps(n: float, where: str, error: type[IdentError] = IdentError) -> int:
    """Refuse a step count above :data:`MAX_STEPS` (time), naming `where`."""
    if not n <= MAX_STEPS:
        raise error(f"{where}: {n:.3g} integration steps exceed the time limit of {MAX_STEPS:.0e} steps")
    return int(n)


#: Seeds accepted by numpy's Generator (non-negative, up to 2^128; we keep 2^63 for JSON).
MAX_SEED = 2**63 - 1


def seed(value, where: str, error: type[IdentError] = IdentError) -> int:
    """A random seed: an integer in [0, 2^63)."""
    return count(value, where, 0, MAX_SEED, error, "seeds are 63-bit")


def shown(value, quotes: bool = True) -> str:
    """A short rendering of a value for a message (never the repr of a huge object)."""
    if isinstance(value, (dict, list, tuple)):
        return f"a {type(value).__name__} of {len(value)} entries"
    text = str(value) if not quotes else repr(value)
    return text if len(text) <= 40 else text[:37] + "..."
