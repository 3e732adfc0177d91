"""The work units of a fleet run: plain functions a worker runs on what it can reach itself.

Map (per log, on the worker that reads it): :func:`condition_log` (read and condition one log,
with the cutoff of the period's first log as ``ident fit`` chooses it; the data set stays in that
worker's memory; a CSV or Parquet log longer than :data:`CHUNK_ROWS` rows -- the job's
``chunk_rows`` -- gives instead the head of :func:`ident.data.chunks.read_head`, read from the
head of the file only), :func:`condition_chunk` (one row range of such a log, read, validated and
conditioned by whichever worker runs it, its samples kept in that worker's memory),
:func:`settle_log` (the chunks' facts judged over the whole log: the plausibility check, and
whether a gap, irregular sampling or clipped torques send the log back to :func:`condition_log`
whole), :func:`describe_log` (the few numbers the plan needs),
:func:`choice_parts_of` (the held-out folds for the friction-term choice) and
:func:`compress_stretch` (one stretch of a segment, a whole number of time blocks, into per-joint
triangles). Reduce (per arm and period): :func:`choose_period_terms` and :func:`fit_period`.
Only compressed triangles and small summaries leave a worker; raw samples never do.

:func:`plan_period` cuts the period's segments into stretches of at most :data:`STRETCH_BLOCKS`
time blocks, so one long log spreads over several workers. Folding the stretches and merging them
in time order gives the same per-block triangles, the same block grouping (the memory cap is
applied block by block, :meth:`ident.estimation.blocks.BlockStore.extend`) and the same term
choice as ``ident fit`` on the period's logs, up to rounding. A chunked log is one segment whose
rows sit in several chunks: its time blocks are those of the whole segment, cut where two chunks
meet (the two halves of such a block are compressed on their own workers and joined when the
stretches merge), and its term-choice folds are the whole segment's (:func:`chunk_spans`).

A log that cannot be read or conditioned gives a :class:`Failed` record (its name and the error
line) instead of an exception, so the rest of its period carries on without it.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..arm.base import base_parameters
from ..arm.loader import load_robot
from ..arm.model import DRY_FRICTION_TERMS, parse_terms
from ..data.chunks import CHUNK_ROWS, ChunkHead, read_head, settle
from ..data.chunks import condition_chunk as _condition_chunk
from ..data.load import load_dataset, options_record
from ..errors import first_line
from ..estimation.blocks import MAX_BLOCKS, block_length, block_ranges
from ..estimation.compress import Compressor, add_segment, iter_segments
from ..estimation.estimate import fit_compressed
from ..estimation.selection import choice_parts, choice_stride, choose_from_parts, merge_parts

#: Most time blocks in one compression work unit (a stretch of a segment).
STRETCH_BLOCKS = 16

_ROBOTS: dict = {}
_BASES: dict = {}


@dataclass
class Failed:
    """A log (or period) that could not be processed: its name and the one-line reason."""

    name: str
    message: str


@dataclass(frozen=True)
class ArmRef:
    """A description file and the selection the fit uses on it, as ``ident fit`` takes them from
    --joints, --lock and --gravity: joints identified (None: every movable one), joints locked at
    positions ((name, rad or m) pairs) and gravity (m/s^2 in the base frame; None: the default)."""

    path: str
    joints: tuple | None = None
    locked: tuple = ()
    gravity: tuple | None = None

    @classmethod
    def of(cls, path: str, joints=None, locked=None, gravity=None) -> ArmRef:
        """From :func:`ident.arm.loader.load_robot`'s keywords (lists, a dict, an array)."""
        return cls(path, None if joints is None else tuple(joints), tuple(sorted((locked or {}).items())),
                   None if gravity is None else tuple(float(x) for x in gravity))

    def load(self):
        g = None if self.gravity is None else np.asarray(self.gravity, dtype=float)
        return load_robot(self.path, joints=None if self.joints is None else list(self.joints), locked=dict(self.locked), gravity=g)


@dataclass
class LogJob:
    """What a worker needs for one log: path or URL, description, profile, conditioning options,
    and the length above which a table log is cut into chunks (rows; None: :data:`CHUNK_ROWS`,
    0: never)."""

    log: str
    description: ArmRef | str
    profile: str | None
    options: dict = field(default_factory=dict)
    chunk_rows: int | None = None


def robot_of(arm: ArmRef | str):
    """The arm of a description (a path, or an :class:`ArmRef` with its joint selection), loaded
    once per worker process (keyed by path, selection and the file's mtime)."""
    arm = arm if isinstance(arm, ArmRef) else ArmRef(arm)
    try:
        key = (arm, os.stat(arm.path).st_mtime_ns)
    except OSError:
        key = (arm, None)
    if key not in _ROBOTS:
        _ROBOTS[key] = arm.load()
    return _ROBOTS[key]


def base_of(description: ArmRef | str, terms):
    """Base parameters of the description's arm for `terms`, computed once per worker process."""
    robot = robot_of(description)
    key = (id(robot), tuple(terms))
    if key not in _BASES:
        _BASES[key] = base_parameters(robot, tuple(terms))
    return _BASES[key]


def condition_log(job: LogJob, first=None, whole: bool = False):
    """Read and condition one log: a Dataset, a :class:`ident.data.chunks.ChunkHead` (a table log
    longer than the job's chunk length, to be conditioned by :func:`condition_chunk` tasks), or
    :class:`Failed`.

    first : None for the period's first log (its cutoff is chosen from its own data, or given in
    the options, as :func:`ident.data.load.load_dataset` chooses it on its first file), else the
    settled summary of the first log, whose cutoff this log then uses (so the period is
    conditioned as one ``load_dataset`` call over its logs). If the first log failed, this one
    chooses its own. whole : never cut into chunks (the fallback of a log its chunks cannot take).
    """
    cutoff = None
    if isinstance(first, dict) and "failed" not in first:
        cutoff = first.get("cutoff")
    try:
        opts = dict(job.options)
        if cutoff is not None:
            opts["cutoff"] = cutoff
        robot = robot_of(job.description)
        why = None
        if not whole:
            head, why = read_head(job.log, robot, job.profile, opts, CHUNK_ROWS if job.chunk_rows is None else job.chunk_rows)
            if head is not None:
                return head
        data = load_dataset([job.log], robot, job.profile, opts)
        if why:
            data.info["whole"] = why
        return data
    except Exception as exc:  # noqa: BLE001 - any failure of one log is reported, not fatal
        return Failed(job.log, first_line(exc))


def condition_chunk(head: ChunkHead, i: int):
    """Read, validate and condition chunk `i` of a long log (:func:`ident.data.chunks.condition_chunk`):
    a data set of the chunk's samples, kept in this worker's memory, or :class:`Failed`."""
    try:
        data = _condition_chunk(head, i)
    except Exception as exc:  # noqa: BLE001 - a bad row in the chunk fails its log, not the run
        return Failed(head.source, first_line(exc))
    data.info["chunk"]["worker"] = _worker()
    return data


def _worker() -> str | None:
    try:
        from distributed import get_worker

        return get_worker().address
    except (ImportError, ValueError):  # not inside a Dask worker: the plain loop
        return None


def describe_log(data) -> dict:
    """The plan's view of a conditioned log: segment sizes and steps, warnings; or the failure;
    for a chunk head the head (``head``), for a chunk its facts (``chunk``)."""
    if isinstance(data, Failed):
        return {"failed": data}
    if isinstance(data, ChunkHead):
        # the head itself: a few numbers per joint, the column plan and the row index, no samples;
        # the chunk tasks get it as a value, so the scheduler spreads them like independent tasks
        return {"head": data, "cutoff": data.cutoff, "options": options_record(data.opts)}
    segs = data.segments
    out = {"sizes": [s.n_samples for s in segs], "steps": [s.dt for s in segs if s.t is not None and s.n_samples > 1],
           "sources": [str(s.source) for s in segs], "warnings": list(data.warnings), "samples": data.n_samples,
           "cutoff": data.info.get("cutoff"), "options": data.info.get("options", {})}
    if "chunk" in data.info:
        out["chunk"] = data.info["chunk"]
    if data.info.get("whole"):
        name = short_name(data.info["files"][0]["path"])
        out["notes"] = [f"{name}: read and conditioned whole by one worker (not cut into chunks: {data.info['whole']})"]
    return out


def settle_log(description: ArmRef | str, head: ChunkHead, *chunks: dict) -> dict:
    """A long log's summary from its chunks' :func:`describe_log` summaries (in file order): one
    segment made of the chunks' samples (``parts``: samples per chunk), the plausibility check
    of the whole log; or ``{"fallback": reason}`` when it must be conditioned whole
    (:func:`ident.data.chunks.settle`), or the first chunk's failure."""
    for c in chunks:
        if "failed" in c:
            return c
    try:
        warnings, why = settle(head, [c["chunk"] for c in chunks], robot_of(description))
    except Exception as exc:  # noqa: BLE001
        return {"failed": Failed(head.source, first_line(exc))}
    if why:
        return {"fallback": why, "note": f"{short_name(head.source)}: read and conditioned whole by one worker (not cut into chunks: {why})"}
    steps = [c["chunk"]["step"] for c in chunks if c["chunk"]["step"] is not None]
    parts = [c["chunk"]["samples"] for c in chunks]
    total = int(sum(parts))
    return {"sizes": [total] if total else [], "parts": parts, "steps": [float(np.median(steps))] if steps else [],
            "sources": [head.source] if total else [], "warnings": warnings, "samples": total, "cutoff": head.cutoff,
            "options": options_record(head.opts), "workers": [c["chunk"].get("worker") for c in chunks]}


@dataclass
class Plan:
    """How a period's good logs are cut into work: block length (samples), sample step (s),
    term-choice stride, and per log a list of stretches ``(part, segment, start, stop, ranges,
    joined)``: `part` the chunk holding it (0 for a log conditioned whole), `joined` when its
    first block is the rest of the previous stretch's last (a block cut where two chunks meet)."""

    block: int
    dt: float | None
    stride: int
    total: int
    stretches: list[list[tuple[int, int, int, list]]]


def plan_period(summaries: list[dict], stretch_blocks: int = STRETCH_BLOCKS) -> Plan:
    """The work plan of a period from its logs' :func:`describe_log` summaries (good logs only),
    with the block rule of :func:`ident.estimation.blocks.block_length` over ALL its segments."""
    sizes = [n for s in summaries for n in s["sizes"]]
    steps = [d for s in summaries for d in s["steps"]]
    dt = float(np.median(steps)) if steps else None
    cutoff = summaries[0]["cutoff"] if summaries else None
    L = block_length(sizes, dt, float(cutoff) if cutoff else None)
    total = int(sum(sizes))
    plan = []
    for s in summaries:
        mine = []
        for k, n in enumerate(s["sizes"]):
            ranges = block_ranges(n, L)
            cuts = [(0, 0, n)] if "parts" not in s else [(i, o, o + c) for i, (o, c) in enumerate(zip(np.cumsum([0] + s["parts"][:-1]), s["parts"])) if c]
            for part, o, e in cuts:  # the segment's blocks, cut where its chunks meet
                own = [(max(x, o) - o, min(y, e) - o, x < o) for x, y in ranges if y > o and x < e]
                for g in range(0, len(own), stretch_blocks):
                    grp = own[g : g + stretch_blocks]
                    a, b = grp[0][0], grp[-1][1]
                    mine.append((part, k, a, b, [(x - a, y - a) for x, y, _ in grp], bool(g == 0 and grp[0][2])))
        plan.append(mine)
    return Plan(L, dt, choice_stride(total), total, plan)


def chunk_spans(summary: dict) -> list:
    """Per chunk of a log its ``(offset, total)`` in the log's one segment (see
    :func:`ident.estimation.selection.choice_parts`); [None] for a log conditioned whole."""
    if "parts" not in summary:
        return [None]
    total = int(sum(summary["parts"]))
    return [(int(o), total) for o in np.cumsum([0] + summary["parts"][:-1])]


def choice_parts_of(data, description: ArmRef | str, stride: int, into: dict | None = None, span=None) -> dict:
    """Held-out folds of one conditioned log for every candidate friction model (small triangles),
    continuing the folds `into` of the period's earlier logs when given (the exact mode); for a
    chunk, `span` is its ``(offset, total)`` in the log's segment (:func:`chunk_spans`)."""
    robot = robot_of(description)
    segs = list(iter_segments(robot, data, with_slow=True))
    return choice_parts(robot, segs, stride, into=into, spans=None if span is None else [span] * len(segs))


def choose_period_terms(description: ArmRef | str, total: int, stride: int, *parts):
    """The period's friction terms from the merged folds of its logs (in time order): a TermChoice."""
    robot = robot_of(description)
    merged = parts[0]
    for p in parts[1:]:  # split mode; the exact mode passes one part carried through the logs
        merged = merge_parts(merged, p)
    return choose_from_parts(robot, merged, total, stride)


def compress_stretch(data, description: ArmRef | str, terms, segment: int, start: int, stop: int, ranges, dt, keep_blocks: bool = True) -> Compressor:
    """Samples ``start:stop`` of one segment of a conditioned log, folded on their own into
    per-joint triangles with their time blocks (no memory cap: the reduce applies it block by
    block). Stretches folded apart and merged equal one pass up to rounding (the split mode)."""
    terms = _terms(terms)
    robot = robot_of(description)
    comp = Compressor(robot, terms, base_of(description, terms), keep_blocks=keep_blocks, max_blocks=max(2, len(ranges)))
    seg = list(iter_segments(robot, data, with_slow=True))[segment]
    return add_segment(comp, seg, any(c in DRY_FRICTION_TERMS for c in comp.terms), start=start, stop=stop, ranges=ranges, dt=dt)


def continue_compression(data, description: ArmRef | str, terms, comp, segment: int, start: int, stop: int, ranges, dt, block: int,
                         keep_blocks: bool = True) -> Compressor:
    """Fold samples ``start:stop`` of one segment into the compressed state `comp` carried over
    from the period's previous stretch (None: a new one): the exact mode. The stretches of a
    period, folded in time order this way, give bit for bit the compressed state of
    :func:`ident.estimation.compress.compress` over the period's logs (which ``ident fit`` fits):
    the fold route of each block depends on the data folded before it."""
    terms = _terms(terms)
    robot = robot_of(description)
    if comp is None:
        comp = Compressor(robot, terms, base_of(description, terms), keep_blocks=keep_blocks)
        comp.block = int(block)
    seg = list(iter_segments(robot, data, with_slow=True))[segment]
    return add_segment(comp, seg, any(c in DRY_FRICTION_TERMS for c in comp.terms), start=start, stop=stop, ranges=ranges, dt=dt)


def _terms(terms):
    return tuple(getattr(terms, "terms", terms))


@dataclass
class PeriodFit:
    """A period's fit: the FitResult, the logs it used, the data warnings, the block length."""

    result: object
    logs: list[str]
    warnings: list[str]
    block: int
    options: dict


def fit_period(description: ArmRef | str, terms, method: str, fit_options: dict, block: int, sources: list[str], logs: list[str],
               warnings: list[str], options: dict, *parts, joins=None) -> PeriodFit:
    """Merge a period's compressed stretches in time order and fit: the reduce step. joins : per
    part, True when its first block continues the previous part's last (:class:`Plan`)."""
    import warnings as _w

    choice = terms if hasattr(terms, "terms") else None
    terms = _terms(terms)
    robot = robot_of(description)
    if len(parts) == 1:  # the exact mode's one carried state
        comp = parts[0]
    else:
        comp = Compressor(robot, terms, base_of(description, terms), keep_blocks=all(p.blocks is not None for p in parts),
                          max_blocks=MAX_BLOCKS)
        for p, j in zip(parts, joins or [False] * len(parts)):
            comp.merge(p, j)
    comp.block = int(block)
    comp.sources = list(sources)
    with _w.catch_warnings():
        # the fit lists its warnings in the result; Python's own warning lines would only repeat them
        _w.simplefilter("ignore")
        res = fit_compressed(comp, method, **fit_options)
    res.term_choice = choice
    return PeriodFit(res, logs, warnings, int(block), options)


def fold_and_fit(data, description: ArmRef | str, terms, state, segment: int, start: int, stop: int, ranges, dt, block: int,
                 keep_blocks: bool, method: str, fit_options: dict, sources: list[str], logs: list[str], warnings: list[str],
                 options: dict) -> PeriodFit:
    """The exact mode's last stretch of a period and its fit in one task (:func:`continue_compression`
    then :func:`fit_period`), so a one-log period costs three tasks: condition, describe, this."""
    comp = continue_compression(data, description, terms, state, segment, start, stop, ranges, dt, block, keep_blocks)
    return fit_period(description, terms, method, fit_options, block, sources, logs, warnings, options, comp)


def parse_fixed_terms(text) -> tuple[str, ...]:
    """Joint terms from an option ("auto" is handled by the caller)."""
    return parse_terms(text)


def short_name(path: str) -> str:
    """A log's name for messages: the path as given (URLs unchanged)."""
    return str(Path(path)) if "://" not in path else path
