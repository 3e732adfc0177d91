"""Loading a robot description by file kind: URDF or our DH file.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import IdentError
from .model import Robot


def load_robot(path, joints=None, locked=None, gravity=None) -> Robot:
    """Load a robot description: URDF (``.urdf``/``.xml``) or our DH file (``.yaml``/``.yml``).

    Parameters
    ----------
    path : file path.
    joints : names of the joints to identify (default: every movable joint). The others are locked.
    locked : {joint name: position (rad or m)} for locked joints (default 0).
    gravity : (3,) gravity vector in the base frame, m/s^2 (default: the file's, else (0, 0, -9.81)).
    """
    p = Path(path)
    if not p.is_file():
        raise IdentError(f"{p}: robot description not found")
    suffix = p.suffix.lower()
    if suffix in (".yaml", ".yml"):
        from .dh import load_dh

        robot = load_dh(p, joints=joints, locked=locked)
    elif suffix in (".urdf", ".xml"):
        from .urdf import load_urdf

        robot = load_urdf(p, joints=joints, locked=locked)
    else:
        raise IdentError(f"{p}: unknown robot description type '{suffix}' (expected .urdf, .xml, .yaml or .yml)")
    if gravity is not None:
        g = np.asarray(gravity, dtype=float)
        if g.shape != (3,) or not np.all(np.isfinite(g)):
            raise IdentError(f"gravity: expected three finite numbers, got {gravity!r}")
        robot.gravity = g
    return robot
