"""Logs in, clean samples out: read, validate and condition one or several logs into a data set.

Data flow::

    files --read_log--> RawLog (SI units, validated) --split--> segments --condition--> Dataset

Recoverable oddities (gaps, irregular sampling, clipped torques, extra joints) are handled in a
documented way and listed in ``Dataset.warnings``.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np

from ..errors import DataError
from .conditioning import CUTOFF_RATIO, cutoff_from_data
from .dataset import CHANNELS, Dataset, Segment
from .options import LogOptions
from .profile import LogProfile, load_profile
from .readers import read_log
from .segments import condition_segment, uniform_pieces


def read_logs(paths, robot=None, profile=None, options=None) -> Dataset:
    """Read and validate logs without filtering: raw, uniformly sampled segments (dq/ddq may be None).

    Same arguments as :func:`load_dataset`. Useful to inspect what a file holds (``ident logs``).
    """
    return _load(paths, robot, profile, options, condition=False)


def load_dataset(paths, robot=None, profile=None, options=None) -> Dataset:
    """Read, validate and condition logs into identification samples.

    Parameters
    ----------
    paths : a path or a list of paths (CSV, Parquet, ROS 1/2 bags). Each file keeps its own
        segments: nothing is filtered, differentiated or averaged across a file boundary or a gap.
    robot : optional :class:`ident.arm.model.Robot`; joints follow its order and every model joint must
        be in the logs.
    profile : optional log profile (YAML path, dict or :class:`LogProfile`).
    options : optional dict or :class:`LogOptions`; its entries override the profile's
        ``conditioning`` section.

    Returns
    -------
    Dataset with conditioned segments: q (rad or m), dq, ddq, tau (N m or N), each (m, n).
    """
    return _load(paths, robot, profile, options, condition=True)


def _resolve_options(prof: LogProfile, options) -> LogOptions:
    opts = LogOptions.from_mapping(prof.conditioning, f"{prof.source}: conditioning")
    if isinstance(options, LogOptions):
        return opts.updated({f.name: getattr(options, f.name) for f in dataclasses.fields(options)
                             if getattr(options, f.name) != getattr(LogOptions(), f.name)}, "options")
    if options is not None and not isinstance(options, dict):
        raise DataError(f"options: expected a dict or LogOptions, got {type(options).__name__}")
    return opts.updated(options, "options")


def _cutoff_of(pieces, opts: LogOptions, path) -> tuple[float, dict]:
    longest = max(pieces, key=lambda s_: s_.n_samples)
    f_max = opts.highest_frequency()
    cutoff, info = cutoff_from_data(longest.q, 1.0 / longest.dt, None if f_max is None else CUTOFF_RATIO * f_max)
    info["from"] = str(path)
    return cutoff, info


def _load(paths, robot, profile, options, condition: bool) -> Dataset:
    prof = load_profile(profile)
    opts = _resolve_options(prof, options)
    if isinstance(paths, (str, Path)):
        paths = [paths]
    paths = list(paths)
    if not paths:
        raise DataError("no log files given")
    cutoff = opts.resolved_cutoff() if condition else None
    warnings: list[str] = []
    counts = dict(read=0, outside_windows=0, short=0, trimmed=0, clipped=0, delay_edges=0, decimated=0, partial_period=0, averaged_out=0, slow=0, stuck=0)
    thresholds = None
    cutoff_info = dict(rule="given") if cutoff is not None else None
    segments: list[Segment] = []
    joint_names = None
    files = []
    noise = []
    for path in paths:
        raw = read_log(path, robot, prof)
        if joint_names is None:
            joint_names = raw.joint_names
        elif raw.joint_names != joint_names:
            raise DataError(f"{path}: joints {', '.join(raw.joint_names)} differ from those of {paths[0]} ({', '.join(joint_names)})")
        if opts.delay is not None and np.ndim(opts.delay) == 1 and np.size(opts.delay) != len(joint_names):
            raise DataError(f"delay: {np.size(opts.delay)} values given for {len(joint_names)} joints")
        warnings += raw.warnings
        counts["read"] += raw.t.shape[0]
        pieces = uniform_pieces(raw, opts, warnings, counts)
        rates = [1.0 / p.dt for p in pieces]
        files.append(dict(path=str(path), samples=int(raw.t.shape[0]), duration=float(raw.t[-1] - raw.t[0]),
                          rate=float(np.median(rates)) if rates else float("nan"), segments=len(pieces),
                          logged=[c for c in CHANNELS if getattr(raw, c) is not None]))
        if not condition:
            segments += pieces
            continue
        if cutoff is None and pieces:
            # one cutoff for every file, chosen on the first one, so the parallel filter is the same throughout
            cutoff, cutoff_info = _cutoff_of(pieces, opts, path)
        if thresholds is None:
            thresholds = np.zeros(len(joint_names))
        for seg in pieces:
            segments += condition_segment(seg, raw.limit, opts, cutoff, joint_names, warnings, counts, noise, thresholds)
        del raw, pieces
    if condition and not segments:
        # the CLI shows this one line only, so it names the files and carries the warnings that explain it
        why = "; ".join(w.replace("\n", " ") for w in warnings[:3]) + (f" (and {len(warnings) - 3} more warnings)" if len(warnings) > 3 else "")
        raise DataError(f"{', '.join(str(p) for p in paths)}: no samples left after conditioning ({why or 'check windows, gaps, clipping and segment lengths'})")
    noise_var = None
    info = dict(files=files, counts=counts, conditioned=condition,
                options={k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in dataclasses.asdict(opts).items()},
                cutoff=cutoff, cutoff_rule=cutoff_info, profile=prof.source,
                slow_velocity=None if thresholds is None else thresholds.tolist())
    if noise:
        dof = np.array([d for _, d, _ in noise], float)
        noise_var = sum(v * d for v, d, _ in noise) / dof.sum()
        info["q_noise_var"] = sum(v * d for _, d, v in noise) / dof.sum()
        info["periods_averaged"] = int(dof.sum() + len(noise))
    return Dataset(list(joint_names), segments, warnings, noise_var, info)
