"""Plausibility of a log against the model: positions far outside the joint limits mean a unit, sign or offset slip.
"""

from __future__ import annotations

import numpy as np

from ..errors import DataError
from .rawlog import RawLog
from .segments import CLIP_FRACTION


def check_plausible(raw: RawLog, robot) -> None:
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
