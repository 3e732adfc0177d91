"""Long table logs cut into row-range chunks, each read and conditioned on its own (the fleet's work units).

A CSV or Parquet log longer than a threshold is cut into consecutive row ranges. Each chunk reads
only its own rows plus the overlap the conditioning needs (:func:`ident.data.streaming.overlap`),
validates them as the whole-file reader does (errors name file, column and the file's own data
row), and conditions them with the log-wide settings, so any machine can condition any chunk and
the chunks' samples, put end to end, equal those of the whole log conditioned at once to rounding
(the block path's argument, :mod:`ident.data.streaming`: the conditioning code is that path's).

* :func:`read_head` reads only the head of the file (its first
  :data:`ident.data.segments.STAT_SAMPLES` samples and the look-ahead they need) and computes what
  the block path computes there once: the nominal step, the data-chosen cutoff, the slow-zone and
  noise-zone velocities of each joint, the edge trims; and where the chunks start. A CSV log is
  indexed once by a scan of its bytes for line ends (:func:`ident.data.tables.csv_row_index`);
  a Parquet log is read by the row groups a chunk overlaps (so a file written as one row group is
  read whole by every chunk: write long logs in row groups well below the chunk length).
* :func:`condition_chunk` conditions one chunk into an in-memory :class:`Dataset` of one segment
  (the chunk's share of the log's one segment) and records the facts only the whole log can
  judge: gaps and step irregularity, samples at a torque limit, the extremes the plausibility
  check looks at.
* :func:`settle` judges those facts for the whole log: the plausibility check (same errors and
  warnings), and whether the chunks' assumptions hold. They do not hold, and the log is then to
  be conditioned whole by the existing path, when the log has a gap or irregular sampling
  (several uniform pieces, each with its own trims and statistics, or resampling) or clipped
  torques (dropped with their neighbourhoods by whole-log rules); :func:`read_head` already says
  so for options the block path does not take (time windows, a delay, period averaging), for CSV
  text whose rows cannot be found by line ends (quotes, empty lines) and for trims longer than the log.

Not computed for a chunked log: the period-spread noise estimate of ``Dataset.noise_var`` (the fit
does not use it); the sample step of its segment is the median of the chunks' median steps.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .dataset import CHANNELS, Dataset, Segment
from .load import cutoff_of, estimated_rows, options_record, resolve_options
from .options import LogOptions
from .profile import load_profile
from .readers import log_format
from .segments import CLIP_FRACTION, STAT_SAMPLES, JointPlan, period_samples
from .streaming import (
    NotStreamable,
    block_samples,
    check_extremes,
    check_logged,
    check_rate,
    condition_rows,
    extremes,
    merge_extremes,
    overlap,
    piece_zones,
    selected_count,
    selected_rows,
    streamable,
    trim_samples,
)
from .tables import CsvIndex, TablePlan, csv_row_index, read_table_rows, table_plan

#: Logs with more rows than this are cut into chunks of about this many rows (about 17 minutes at 1 kHz).
CHUNK_ROWS = 1 << 20


class _Window:
    """Rows ``w0..`` of a log in memory, read by file rows as the block path's store is read."""

    def __init__(self, t: np.ndarray, arrays: dict, w0: int):
        self.t, self.ch, self.w0 = t, arrays, int(w0)

    def read(self, name: str, a: int, b: int):
        x = self.t if name == "t" else self.ch[name]
        return None if x is None else x[a - self.w0 : b - self.w0]

    def read_col(self, name: str, k: int, a: int, b: int):
        x = self.ch[name]
        return None if x is None else x[a - self.w0 : b - self.w0, k]


@dataclass
class ChunkHead:
    """What every chunk of one log needs: the table's column plan and row index, the options, the
    log-wide settings from its head (step s, cutoff Hz, per-joint zone velocities, trim samples),
    and the chunks: row `edges` (K + 1,) and conditioned samples per chunk `sizes` (K,)."""

    source: str
    fmt: str
    table: TablePlan
    index: CsvIndex | None
    opts: LogOptions
    rows: int
    step: float
    cutoff: float | None
    cutoff_info: dict
    plan: JointPlan
    zones: list
    trim: int
    edges: list
    sizes: list

    @property
    def chunks(self) -> int:
        return len(self.edges) - 1

    def selected_in(self, a: int, b: int) -> np.ndarray:
        """Rows in [a, b) of the file that become samples (after the trims and the decimation)."""
        return selected_rows([(self.trim, self.rows - self.trim)], self.opts.decimate, a, b)

    def selected_before(self, x: int) -> int:
        """How many rows before row x become samples (no index of the whole log is built)."""
        return selected_count([(self.trim, self.rows - self.trim)], self.opts.decimate, int(x))


def read_head(path, robot=None, profile=None, options=None, chunk_rows: int = CHUNK_ROWS) -> tuple[ChunkHead | None, str | None]:
    """The head of a log for conditioning it in chunks of about `chunk_rows` rows (module notes).

    Returns ``(head, None)``; ``(None, None)`` for a log that is not a local CSV or Parquet file
    or has at most `chunk_rows` rows (it is read whole, as always); ``(None, reason)`` for a
    longer log that must be read whole all the same. Errors of the head's rows raise
    :class:`ident.errors.DataError` as the whole-file reader would.
    """
    prof = load_profile(profile)
    opts = resolve_options(prof, options)
    p = Path(path)
    try:
        fmt = log_format(path, prof)
    except Exception:  # noqa: BLE001 - the whole-file path reports it
        return None, None
    if fmt not in ("csv", "parquet") or not p.is_file() or not chunk_rows:
        return None, None
    index = None
    if fmt == "csv":
        if (estimated_rows(p, prof) or 0) <= chunk_rows // 2:
            return None, None
        index = csv_row_index(p)
        if isinstance(index, str):
            return None, f"CSV text with {index}"
        rows = index.rows
    else:
        rows = estimated_rows(p, prof) or 0
    if rows <= chunk_rows:
        return None, None
    why = streamable(opts)
    if why:
        return None, f"the options ask for {why}"
    table = table_plan(p, fmt, robot, prof)
    t, arrays = read_table_rows(table, fmt, 0, min(rows, STAT_SAMPLES + 1), index)
    d = np.diff(t)
    nominal = float(np.median(d))
    if np.any(d > opts.max_gap * nominal):
        return None, "a gap in the timestamps"
    if float(np.max(np.abs(d - nominal))) / nominal > opts.jitter:
        return None, "irregular sampling"
    dt = float(t[1] - t[0])
    fs = 1.0 / dt
    cutoff, info = opts.resolved_cutoff(), dict(rule="given")
    if cutoff is None:
        cutoff, info = cutoff_of([(0, rows, nominal)], opts, p, _Window(t, arrays, 0))
    has_dq, has_ddq = arrays["dq"] is not None, arrays["ddq"] is not None
    plan = JointPlan.make(rows, fs, cutoff, opts, False, not (opts.logged_velocity and has_dq), not (opts.logged_acceleration and has_ddq))
    t_last = float(read_table_rows(table, fmt, rows - 2, rows, index)[0][-1])
    check_rate(cutoff, dt, opts, f"{p} (t = {t[0]:.6g}..{t_last:.6g} s)")
    if opts.period:
        period_samples(opts.period, fs)
    try:
        trim = trim_samples(opts, cutoff, fs, rows)
    except NotStreamable:
        return None, "trims longer than the log"
    check_logged(opts, str(p), has_dq, has_ddq, cutoff)
    look = min(rows, STAT_SAMPLES + overlap(plan))
    if look > t.shape[0]:
        t, arrays = read_table_rows(table, fmt, 0, look, index)
    zones = piece_zones(plan, _Window(t, arrays, 0).read_col, 0, len(table.joint_names))
    k = -(-rows // int(chunk_rows))
    edges = [int(x) for x in np.linspace(0, rows, k + 1).round()]
    head = ChunkHead(str(p), fmt, table, index, opts, rows, nominal, cutoff, info, plan, zones, trim, edges, [])
    head.sizes = [head.selected_before(e1) - head.selected_before(e0) for e0, e1 in itertools.pairwise(edges)]
    return head, None


def condition_chunk(head: ChunkHead, i: int) -> Dataset:
    """Read, validate and condition chunk `i` of a log (rows ``edges[i]..edges[i+1]-1`` and the
    overlap around them): a data set of at most one in-memory segment, whose ``info["chunk"]``
    holds the facts :func:`settle` judges (``index``, ``rows``, ``samples``, ``offset`` in the
    log's segment, ``step`` s, ``gaps`` (count, longest s, first t s), ``jitter``, ``clip``
    (per joint max |tau|, samples at the limit), ``extremes``)."""
    a, b = head.edges[i], head.edges[i + 1]
    plan, opts, m = head.plan, head.opts, head.rows
    ov = overlap(plan)
    w0, w1 = max(0, a - ov), min(m, b + ov)
    t, arrays = read_table_rows(head.table, head.fmt, w0, w1, head.index)
    own = slice(a - w0, b - w0)
    d = np.diff(t[max(a - 1, w0) - w0 : b - w0])  # the step into the chunk is the chunk's to judge
    gap = np.flatnonzero(d > opts.max_gap * head.step)
    gaps = (int(gap.size), float(d[gap].max()) if gap.size else 0.0, float(t[max(a - 1, w0) - w0 + gap[0]]) if gap.size else None)
    jitter = float(np.max(np.abs(d - head.step))) / head.step if d.size else 0.0
    tau_own = np.abs(arrays["tau"][own])
    lim = head.table.limit
    hits = [int(np.sum(tau_own[:, k] >= CLIP_FRACTION * lim[k])) if np.isfinite(lim[k]) else 0 for k in range(len(lim))]
    lo, hi = head.selected_before(a), head.selected_before(b)
    parts = []
    block = block_samples(opts)
    for c0 in range(a, b, block):  # memory of one block at a time, as on the block path
        c1 = min(b, c0 + block)
        s0, s1 = max(0, c0 - ov), min(m, c1 + ov)
        picked = head.selected_in(c0, c1)
        if not picked.size:
            continue
        win = {c: None if arrays[c] is None else arrays[c][s0 - w0 : s1 - w0] for c in CHANNELS}
        parts.append((t[picked - w0],) + condition_rows(plan, win, picked - s0, head.zones))
    segs = []
    if parts:
        out = {c: np.concatenate([p_[1][c] for p_ in parts]) for c in CHANNELS}
        tt = np.concatenate([p_[0] for p_ in parts])
        slow, stuck, dry = (np.concatenate([p_[k] for p_ in parts]) for k in (2, 3, 4))
        segs.append(Segment(head.source, tt, out["q"], out["dq"], out["ddq"], out["tau"], slow, stuck,
                            dry if opts.parallel_friction else None))
    facts = dict(index=int(i), rows=(int(a), int(b)), samples=hi - lo, offset=lo,
                 step=float(np.median(np.diff(segs[0].t))) if segs and segs[0].n_samples > 1 else None,
                 gaps=gaps, jitter=jitter, clip=(tau_own.max(axis=0), hits), extremes=extremes(arrays["tau"][own], arrays["q"][own], a))
    info = dict(cutoff=head.cutoff, cutoff_rule=head.cutoff_info, options=options_record(opts), chunk=facts)
    return Dataset(list(head.table.joint_names), segs, [], None, info)


def settle(head: ChunkHead, facts: list[dict], robot=None) -> tuple[list[str], str | None]:
    """Judge a log's chunks together (`facts`: their ``info["chunk"]``, in file order): the
    plausibility check of the whole log (raises its :class:`ident.errors.DataError`), then
    ``(warnings, None)`` when the chunks hold the log's samples, or ``(warnings, reason)`` when the
    log must be conditioned whole (a gap, irregular sampling, clipped torques)."""
    warnings = list(head.table.warnings)
    check_extremes(head.source, head.table.joint_names, head.table.limit, warnings, merge_extremes([f["extremes"] for f in facts]), robot)
    count = sum(f["gaps"][0] for f in facts)
    if count:
        first = next(f["gaps"][2] for f in facts if f["gaps"][0])
        return warnings, f"{count} gap(s) in the timestamps (the first at t = {first:.6g} s)"
    if max(f["jitter"] for f in facts) > head.opts.jitter:
        return warnings, "irregular sampling"
    if head.opts.drop_clipped:
        amax = np.max([f["clip"][0] for f in facts], axis=0)
        hits = np.sum([f["clip"][1] for f in facts], axis=0)
        lim = head.table.limit
        if any(np.isfinite(lim[k]) and amax[k] <= lim[k] * (2.0 - CLIP_FRACTION) and hits[k] for k in range(len(lim))):
            return warnings, "torques at their limit (clipped samples are dropped by rules over the whole log)"
    return warnings, None
