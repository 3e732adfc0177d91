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


def selection_from_args(args: argparse.Namespace) -> dict:
    """The joint selection of --joints, --lock and --gravity as :func:`ident.arm.loader.load_robot`
    keywords: joints (list or None), locked ({name: rad or m}), gravity ((3,) m/s^2 or None)."""
    joints = _split(args.joints) or None
    gravity = parse_vector(args.gravity, "--gravity", 3) if args.gravity else None
    return {"joints": joints, "locked": parse_locks(args.lock), "gravity": gravity}


def robot_from_args(args: argparse.Namespace) -> Robot:
    """Load the robot named by the options of :func:`add_robot_arguments`."""
    return load_robot(args.robot, **selection_from_args(args))


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




def _close(a, b) -> bool:
    try:
        return bool(np.allclose(np.asarray(a, dtype=float), np.asarray(b, dtype=float), rtol=1e-12, atol=1e-12))
    except (TypeError, ValueError):
        return a == b


def _show(v) -> str:
    if isinstance(v, (list, tuple, np.ndarray)):
        return ",".join(f"{float(x):g}" for x in np.asarray(v, dtype=float).reshape(-1))
    if isinstance(v, float):
        return f"{v:g}"
    return str(v)


def robot_for_params(args: argparse.Namespace, params_path, robot_path=None):
    """Load the robot and the parameter file `params_path` the way the file says it was made.

    The joint selection, locked joints and gravity come from the file's ``context`` (and its
    ``joints``); --joints, --lock and --gravity may repeat them but an option that contradicts the
    file is refused with one line naming both values. Files without a context use the options.
    Returns (robot, parameter set).
    """
    from ..errors import DataError
    from ..handover.paramfile import load_parameters

    ps = load_parameters(params_path)
    ctx = ps.context or {}
    robot_path = robot_path or args.robot
    if not ctx:
        args.robot = robot_path
        robot = robot_from_args(args)
        return robot, ps.check_robot(robot, where=str(params_path))
    joints = _split(args.joints)
    if joints and set(joints) != set(ps.joint_names):
        raise DataError(f"--joints {','.join(joints)} conflicts with the parameter file's joints {','.join(ps.joint_names)} ({params_path}: joints)")
    file_locked = dict(ctx.get("locked", {}))
    for name, val in parse_locks(args.lock).items():
        if name not in file_locked:
            raise DataError(f"--lock {name}={val:g} conflicts with the parameter file, where '{name}' is not locked ({params_path}: context.locked)")
        if not _close(val, file_locked[name]):
            raise DataError(f"--lock {name}={val:g} conflicts with the parameter file's {name}={file_locked[name]:g} ({params_path}: context.locked)")
    gravity = ctx.get("gravity")
    if args.gravity:
        g = parse_vector(args.gravity, "--gravity", 3)
        if gravity is not None and not _close(g, gravity):
            raise DataError(f"--gravity {_show(g)} conflicts with the parameter file's gravity {_show(gravity)} ({params_path}: context.gravity)")
        gravity = g
    robot = load_robot(robot_path, joints=list(ps.joint_names), locked=file_locked, gravity=gravity)
    return robot, ps.check_robot(robot, where=str(params_path))


def conditioning_for_params(ps, opts: dict, where) -> dict:
    """Log options `opts` (from the command line) completed with the conditioning the parameter
    file's fit used; an option that contradicts the file is refused with one line naming both values."""
    from ..errors import DataError

    out = dict(opts)
    for key, val in ((ps.context or {}).get("conditioning") or {}).items():
        if key in out and not _close(out[key], val):
            raise DataError(f"--{key.replace('_', '-')} {_show(out[key])} conflicts with the parameter file's {key} {_show(val)} ({where}: context.conditioning)")
        out[key] = val
    return out
