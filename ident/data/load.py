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
from . import streaming
from .conditioning import CUTOFF_RATIO, cutoff_from_data
from .dataset import CHANNELS, Dataset, Segment
from .options import LogOptions
from .profile import LogProfile, load_profile
from .readers import log_format, read_log
from .segments import STAT_SAMPLES, condition_segment, uniform_pieces
from .spill import Spill
from .tables import table_rows


def read_logs(paths, robot=None, profile=None, options=None) -> Dataset:
    """Read and validate logs without filtering: raw, uniformly sampled segments (dq/ddq may be None).

    Same arguments as :func:`load_dataset`. Useful to inspect what a file holds (``ident logs``).
    """
    return _load(paths, robot, profile, options, condition=False)


def load_dataset(paths, robot=None, profile=None, options=None, *, stream: bool | None = None, block: int | None = None) -> Dataset:
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
    stream : read and condition the logs block by block into a temporary store on disk
        (:mod:`ident.data.streaming`: same samples, memory of one block). None (default): when a
        CSV or Parquet log holds more than :data:`ident.data.streaming.STREAM_ROWS` rows and the
        options allow it; True: whenever the options allow it; False: never.
    block : samples a block on that path (default :func:`ident.data.streaming.block_samples`).

    Returns
    -------
    Dataset with conditioned segments: q (rad or m), dq, ddq, tau (N m or N), each (m, n). On the
    block path the segments keep their arrays on disk (:class:`ident.data.spill.StoredSegment`:
    the same fields, read on access; ``read(a, b)`` reads a range of rows).
    """
    prof = load_profile(profile)
    opts = resolve_options(prof, options)
    if (stream is not False and streaming.streamable(opts) is None and _tables_only(paths, prof)
            and (stream or any((estimated_rows(p, prof) or 0) > streaming.STREAM_ROWS for p in _path_list(paths)))):
        try:
            return _load(paths, robot, prof, opts, condition=True, stream_block=int(block or streaming.block_samples(opts)), resolved=True)
        except streaming.NotStreamable:
            pass  # irregular sampling or an extreme trim: the whole-file path below handles it
    return _load(paths, robot, prof, opts, condition=True, resolved=True)


def _path_list(paths) -> list:
    return [paths] if isinstance(paths, (str, Path)) else list(paths)


def _tables_only(paths, prof: LogProfile) -> bool:
    try:
        return all(Path(p).is_file() and log_format(p, prof) in ("csv", "parquet") for p in _path_list(paths))
    except DataError:
        return False  # the whole-file path reports it


def estimated_rows(path, prof: LogProfile) -> int | None:
    """Rows of a table log: exact for Parquet (footer), estimated from the first lines for CSV."""
    fmt = log_format(path, prof)
    if fmt == "parquet":
        return table_rows(Path(path), fmt)
    try:
        size = Path(path).stat().st_size
        with open(path, "rb") as fh:
            head = fh.read(1 << 16)
    except OSError:
        return None
    lines = head.count(b"\n")
    return int(size / (len(head) / lines)) if lines > 1 else None


def resolve_options(prof: LogProfile, options) -> LogOptions:
    """The log options of a profile's conditioning section overridden by `options` (dict or LogOptions)."""
    opts = LogOptions.from_mapping(prof.conditioning, f"{prof.source}: conditioning")
    if isinstance(options, LogOptions):
        return opts.updated({f.name: getattr(options, f.name) for f in dataclasses.fields(options)
                             if getattr(options, f.name) != getattr(LogOptions(), f.name)}, "options")
    if options is not None and not isinstance(options, dict):
        raise DataError(f"options: expected a dict or LogOptions, got {type(options).__name__}")
    return opts.updated(options, "options")


def options_record(opts: LogOptions) -> dict:
    """The options a data set was conditioned with, as plain values (its ``info["options"]``)."""
    return {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in dataclasses.asdict(opts).items()}


def cutoff_of(pieces, opts: LogOptions, path, raw=None) -> tuple[float, dict]:
    """The data-chosen cutoff (Hz) and its record, from at most the first STAT_SAMPLES samples of
    the longest piece (`raw`: the stored table the block path's pieces index into)."""
    f_max = opts.highest_frequency()
    lowest = None if f_max is None else CUTOFF_RATIO * f_max
    if raw is not None:
        s0, e0, step = max(pieces, key=lambda p_: p_[1] - p_[0])
        cutoff, info = cutoff_from_data(streaming.piece_head(raw, s0, e0), 1.0 / step, lowest)
    else:
        longest = max(pieces, key=lambda s_: s_.n_samples)
        cutoff, info = cutoff_from_data(longest.q[:STAT_SAMPLES], 1.0 / longest.dt, lowest)
    info["from"] = str(path)
    return cutoff, info


def _load(paths, robot, profile, options, condition: bool, stream_block: int | None = None, resolved: bool = False) -> Dataset:
    prof = load_profile(profile)
    opts = options if resolved else resolve_options(prof, options)
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
    spill = out_files = None
    if stream_block:
        spill = Spill()
    for path in paths:
        if stream_block:
            raw = streaming.store_table(spill, Path(path), log_format(path, prof), robot, prof, stream_block)
        else:
            raw = read_log(path, robot, prof)
        if joint_names is None:
            joint_names = raw.joint_names
        elif raw.joint_names != joint_names:
            raise DataError(f"{path}: joints {', '.join(raw.joint_names)} differ from those of {paths[0]} ({', '.join(joint_names)})")
        if opts.delay is not None and np.ndim(opts.delay) == 1 and np.size(opts.delay) != len(joint_names):
            raise DataError(f"delay: {np.size(opts.delay)} values given for {len(joint_names)} joints")
        warnings += raw.warnings
        if stream_block:
            counts["read"] += raw.rows
            pieces = streaming.pieces(raw, opts, warnings, counts, stream_block)
            rates = [1.0 / step for _, _, step in pieces]
            files.append(dict(path=str(path), samples=int(raw.rows), duration=float(raw.t_last - raw.t_first),
                              rate=float(np.median(rates)) if rates else float("nan"), segments=len(pieces),
                              logged=[c for c in CHANNELS if raw.ch[c] is not None]))
        else:
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
            cutoff, cutoff_info = cutoff_of(pieces, opts, path, raw if stream_block else None)
        if thresholds is None:
            thresholds = np.zeros(len(joint_names))
        for seg in pieces:
            if stream_block:
                if out_files is None:
                    out_files = streaming.output_files(spill, len(joint_names))
                segments += streaming.condition_stream(raw, seg[0], seg[1], opts, cutoff, joint_names, warnings, counts,
                                                       noise, thresholds, out_files, stream_block)
            else:
                segments += condition_segment(seg, raw.limit, opts, cutoff, joint_names, warnings, counts, noise, thresholds)
        if stream_block:
            raw.close()
        del raw, pieces
    if condition and not segments:
        # the CLI shows this one line only, so it names the files and carries the warnings that explain it
        why = "; ".join(w.replace("\n", " ") for w in warnings[:3]) + (f" (and {len(warnings) - 3} more warnings)" if len(warnings) > 3 else "")
        raise DataError(f"{', '.join(str(p) for p in paths)}: no samples left after conditioning ({why or 'check windows, gaps, clipping and segment lengths'})")
    noise_var = None
    info = dict(files=files, counts=counts, conditioned=condition,
                options=options_record(opts),
                cutoff=cutoff, cutoff_rule=cutoff_info, profile=prof.source,
                slow_velocity=None if thresholds is None else thresholds.tolist())
    if noise:
        dof = np.array([d for _, d, _ in noise], float)
        noise_var = sum(v * d for v, d, _ in noise) / dof.sum()
        info["q_noise_var"] = sum(v * d for _, d, v in noise) / dof.sum()
        info["periods_averaged"] = int(dof.sum() + len(noise))
    if stream_block:
        info["stored"] = True  # segments on disk (StoredSegment), read back block by block
    return Dataset(list(joint_names), segments, warnings, noise_var, info)
