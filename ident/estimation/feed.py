"""What the fit reads: the segments of a data set (in memory or kept on disk), an array tuple, or
a list of those, as uniform records with their slow/stuck flags and dry-friction signals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..arm.model import Robot
from ..errors import DataError


def stored_segment(seg) -> bool:
    """True for a segment that keeps its arrays on disk and reads them by rows
    (:class:`ident.data.spill.StoredSegment`: ``read(a, b)``, ``take(rows)``)."""
    return hasattr(seg, "read") and hasattr(seg, "take") and hasattr(seg, "n_samples")


def segment_rows(seg) -> int:
    """Samples of a segment from :func:`iter_segments` (without reading a stored one)."""
    return int(seg.n_samples) if stored_segment(seg) else int(seg.q.shape[0])


@dataclass
class SegmentData:
    """One stretch of samples for the fit: arrays (m, n) in SI; `slow`, `stuck` (m, n) bool flags
    or None; `dry` (m, n, 4) filtered dry-friction signals or None (see :func:`ident.arm.dynamics.term_columns`)."""

    source: str
    q: np.ndarray
    dq: np.ndarray
    ddq: np.ndarray
    tau: np.ndarray
    slow: np.ndarray | None = None
    stuck: np.ndarray | None = None
    dry: np.ndarray | None = None


def data_timing(data) -> tuple[float | None, float | None]:
    """(sample step s, low-pass cutoff Hz) of a data set (median segment step; the cutoff it was
    conditioned with), or Nones for arrays."""
    if not hasattr(data, "segments"):
        return None, None
    steps = [s.dt for s in data.segments if (stored_segment(s) or getattr(s, "t", None) is not None) and s.n_samples > 1]
    dt = float(np.median(steps)) if steps else None
    cutoff = getattr(data, "info", {}).get("cutoff")
    return dt, (float(cutoff) if cutoff else None)


def iter_segments(robot: Robot, data, with_slow: bool = False):
    """Yield the segments of a data set, an array tuple ``(q, dq, ddq, tau)``, or a list of those.

    Without `with_slow`: ``(source, q, dq, ddq, tau)`` tuples. With it: :class:`SegmentData`
    records that also carry the segment's slow and stuck flags and filtered dry-friction signals,
    or, for a segment kept on disk, that segment itself (same fields; :func:`stored_segment`),
    so the caller can read it by rows.
    """
    for item in _segments(robot, data):
        yield item if with_slow else (item.source, item.q, item.dq, item.ddq, item.tau)


def _segments(robot: Robot, data):
    if hasattr(data, "segments"):
        names = getattr(data, "joint_names", None)
        if names is not None and list(names) != list(robot.joint_names):
            raise DataError(f"data set joints {list(names)} do not match the model's joints {list(robot.joint_names)} (load it with the robot)")
        for k, seg in enumerate(data.segments):
            if stored_segment(seg):
                yield seg  # conditioned on the block path: read by rows where it is used
                continue
            if seg.dq is None or seg.ddq is None:
                raise DataError(f"{seg.source}: segment has no velocities/accelerations (load the logs with load_dataset, which conditions them)")
            yield SegmentData(str(getattr(seg, "source", "") or f"segment {k}"), seg.q, seg.dq, seg.ddq, seg.tau,
                              getattr(seg, "slow", None), getattr(seg, "stuck", None), getattr(seg, "dry", None))
        return
    if isinstance(data, tuple) and len(data) == 4 and not hasattr(data[0], "segments") and np.ndim(data[0]) in (1, 2):
        yield SegmentData("arrays", *data)
        return
    if isinstance(data, (list, tuple)):
        if not data:
            raise DataError("no data given")
        for k, item in enumerate(data):
            for seg in _segments(robot, item):
                if seg.source == "arrays":
                    seg.source = f"arrays[{k}]"
                yield seg
        return
    raise DataError(f"data: expected a data set or (q, dq, ddq, tau) arrays, got {type(data).__name__}")
