"""Options shared by the commands: which robot, which joints, which terms, output style."""

from __future__ import annotations

import argparse
import json
import sys

import numpy as np

from ..arm.loader import load_robot
from ..arm.model import Robot, parse_terms
from ..errors import IdentError
from ..text import SAFETY_CAUTIONS, format_table  # noqa: F401  (the commands' shared text)


def add_robot_arguments(parser: argparse.ArgumentParser, positional: bool = True) -> None:
    """Add ROBOT (URDF or DH YAML) and the joint-selection options --joints, --lock, --gravity."""
    if positional:
        parser.add_argument("robot", metavar="ROBOT", help="robot description: URDF (.urdf) or DH file (.yaml)")
    parser.add_argument("--joints", metavar="J1,J2,...", help="joints to identify (default: every movable joint)")
    parser.add_argument("--lock", metavar="J=VALUE,...", help="lock joints at positions (rad or m), e.g. finger1=0.02,finger2=0.02")
    parser.add_argument("--gravity", metavar="GX,GY,GZ", help="gravity in the base frame, m/s^2 (default 0,0,-9.81)")


def _split(text: str | None) -> list[str]:
    return [t for t in (text or "").replace(" ", "").split(",") if t]


def parse_locks(text: str | None) -> dict[str, float]:
    """``"a=0.1,b=0"`` -> {"a": 0.1, "b": 0.0}; one-line errors on bad items."""
    out = {}
    for item in _split(text):
        name, sep, val = item.partition("=")
        if not sep or not name:
            raise IdentError(f"--lock: expected NAME=VALUE, got '{item}'")
        try:
            out[name] = float(val)
        except ValueError:
            raise IdentError(f"--lock: value '{val}' of joint '{name}' is not a number") from None
    return out


def parse_vector(text: str, option: str, size: int) -> np.ndarray:
    """``"0,0,-9.81"`` -> array of `size` floats; one-line error naming `option`."""
    try:
        vals = np.array([float(t) for t in _split(text)])
    except ValueError:
        raise IdentError(f"{option}: '{text}' is not {size} numbers") from None
    if vals.size != size or not np.all(np.isfinite(vals)):
        raise IdentError(f"{option}: '{text}' is not {size} finite numbers")
    return vals


def robot_from_args(args: argparse.Namespace) -> Robot:
    """Load the robot named by the options of :func:`add_robot_arguments`."""
    joints = _split(args.joints) or None
    gravity = parse_vector(args.gravity, "--gravity", 3) if args.gravity else None
    return load_robot(args.robot, joints=joints, locked=parse_locks(args.lock), gravity=gravity)


def add_terms_argument(parser: argparse.ArgumentParser, default: str = "fv,fc,ia", auto: bool = False) -> None:
    """Add --terms (joint terms carried by the model); with `auto`, "auto" (chosen from the data) is allowed."""
    extra = "; auto: the friction model that best predicts held-out blocks of the logs" if auto else ""
    parser.add_argument(
        "--terms",
        default=default,
        metavar="T1,T2",
        help=f"per-joint terms: fv (viscous), fc (Coulomb), fo (offset), ia (armature), fcp,fcn (directional Coulomb), "
             f"fl1,fl2,fl3 (low-speed shape; groups directional, lowspeed), all or none{extra} (default {default})",
    )


def terms_from_args(args: argparse.Namespace):
    """The parsed --terms option (the string "auto" passes through where the command allows it)."""
    if str(args.terms).strip().lower() == "auto":
        return "auto"
    return parse_terms(args.terms)


def print_json(obj) -> None:
    """Print `obj` as indented JSON on stdout (numpy values converted)."""
    json.dump(obj, sys.stdout, indent=2, default=_jsonable)
    sys.stdout.write("\n")


def _jsonable(x):
    if isinstance(x, np.ndarray):
        return x.tolist()
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    raise TypeError(f"not JSON serializable: {type(x).__name__}")


