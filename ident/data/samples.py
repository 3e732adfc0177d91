"""Conditioned samples out: writing them as a table and describing a data set.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import DataError
from .dataset import CHANNELS, Dataset
from .tables import TABLE_SUFFIXES


def write_samples(path, dataset: Dataset) -> None:
    """Write conditioned samples in the default table convention (CSV or Parquet by suffix), atomically.

    Columns: ``segment`` (1-based), ``time`` (s), then per joint ``<joint>.q``, ``.dq``, ``.ddq``,
    ``.tau`` (SI). Reading the file back splits it at segment boundaries (time gaps).
    """
    import pandas as pd

    from ..fileio import atomic_path

    p = Path(path)
    kind = TABLE_SUFFIXES.get(p.suffix.lower())
    if kind is None:
        raise DataError(f"{p}: samples are written as .csv or .parquet, not '{p.suffix}'")
    if dataset.n_samples == 0:
        raise DataError(f"{p}: no samples to write")
    cols = {"segment": np.concatenate([np.full(s.n_samples, k + 1) for k, s in enumerate(dataset.segments)]), "time": dataset.t}
    for ch in CHANNELS:
        a = getattr(dataset, ch)
        if a is None:
            continue
        for k, j in enumerate(dataset.joint_names):
            cols[f"{j}.{ch}"] = a[:, k]
    frame = pd.DataFrame(cols)
    with atomic_path(p) as tmp:
        if kind == "csv":
            frame.to_csv(tmp, index=False, float_format="%.17g")
        else:
            frame.to_parquet(tmp, index=False)


def describe(dataset: Dataset) -> dict:
    """A JSON-friendly summary: joints, per-file rate/duration/segments, sample counts, warnings."""
    segs = dataset.segments
    return dict(
        joints=list(dataset.joint_names),
        samples=dataset.n_samples,
        segments=[dict(source=s.source, start=float(s.t[0]), end=float(s.t[-1]), samples=s.n_samples,
                       rate=(1.0 / s.dt if s.n_samples > 1 else None)) for s in segs],
        files=dataset.info.get("files", []),
        dropped={k: v for k, v in dataset.info.get("counts", {}).items() if k != "read"},
        ranges=_ranges(dataset),
        noise_var=None if dataset.noise_var is None else dataset.noise_var.tolist(),
        cutoff=dataset.info.get("cutoff"),
        cutoff_rule=dataset.info.get("cutoff_rule"),
        slow_velocity=dataset.info.get("slow_velocity"),
        conditioned=dataset.info.get("conditioned"),
        warnings=list(dataset.warnings),
    )


def _ranges(dataset: Dataset) -> dict:
    """Per joint and channel: [min, max] over the samples (SI), to spot unit or sign mistakes."""
    out = {}
    for ch in CHANNELS:
        parts = [getattr(s, ch) for s in dataset.segments]
        if not parts or any(p is None for p in parts):
            continue
        lo = np.min([p.min(axis=0) for p in parts], axis=0)
        hi = np.max([p.max(axis=0) for p in parts], axis=0)
        out[ch] = {j: [float(lo[k]), float(hi[k])] for k, j in enumerate(dataset.joint_names)}
    return out
