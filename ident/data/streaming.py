"""Long logs in flat memory: reading and conditioning a table log block by block.

A multi-hour log at 1 kHz does not fit in memory once filtered, differentiated and given its
dry-friction signals. This path reads the file in blocks (Parquet record batches, CSV through
pyarrow's streaming reader), validates each block as the whole-file reader does (errors name the
file, column and data row), and keeps the raw SI channels in a temporary store on disk
(:mod:`ident.data.spill`). Each uniform segment is then conditioned in overlapping blocks and the
conditioned samples go to the store too; the data set's segments read them back in time blocks,
so ``ident fit`` never holds the whole log.

**Same samples as conditioning the whole segment.** Every block is filtered over the block plus
an overlap on each side and cut back to the block. The overlap is the samples it takes the
zero-phase Butterworth's start-up transient to decay below 1e-16 of its size (from the slowest
pole radius, :func:`ident.data.conditioning.settle_samples`), for the parallel filter and the
lighter dry-friction filter in turn, plus the stuck-run length, the reversal margin (or the slow zone's spread) and two
derivative windows, so the derivatives, slow and stuck flags and dry-friction signals of the
block equal the whole segment's to rounding. At a true segment end the block pads as the whole
segment does (the same edge padding length). The statistics that look at a whole segment or file
-- nominal step, slow-zone velocities, data-chosen cutoff -- use at most its first
:data:`ident.data.segments.STAT_SAMPLES` samples in both paths, so they are computed once, before
the blocks, from a bounded look-ahead.

The per-block conditioning (:func:`condition_rows`), the slow-zone statistics (:func:`piece_zones`)
and the plausibility check from extremes (:func:`check_extremes`) are also what
:mod:`ident.data.chunks` runs on a log cut into row ranges for several machines.

Not on this path (the whole-file path runs instead): bags, time windows, a torque delay, period
averaging, irregular sampling that needs resampling, and segments shorter than a block (those
are conditioned whole, in memory).
"""

from __future__ import annotations

import itertools

import numpy as np

from ..errors import DataError
from . import conditioning as cond
from .checks import check_plausible
from .dataset import CHANNELS, Segment, sample_step
from .options import LogOptions
from .rawlog import RawLog
from .segments import CLIP_FRACTION, STAT_SAMPLES, JointPlan, condition_segment, period_samples
from .spill import Spill, StoredSegment

#: Samples of a segment conditioned at a time (before the overlap is added), without decimation:
#: the conditioned channels of a block are held until stored, so this sets the path's peak memory.
BLOCK = 1 << 17
#: Input samples of a block when decimating (the block's output is then a fraction of them). The
#: overlap on each side is a few thousand samples at a low cutoff; at 2^17 its filtering cost 7 %
#: of the time of a decimated 1 h log (scripts/bench_logs.py).
MAX_BLOCK = 1 << 18


def block_samples(opts: LogOptions) -> int:
    """Input samples per block on this path: :data:`BLOCK` output samples, at most :data:`MAX_BLOCK` read."""
    return min(MAX_BLOCK, BLOCK * max(1, int(opts.decimate)))

#: Rows read from the file at a time.
READ_ROWS = 1 << 16

#: Logs with more rows than this go by the block path when loaded (about 35 minutes at 1 kHz).
STREAM_ROWS = 1 << 21


class NotStreamable(Exception):
    """The block path does not handle this log or these options; the whole-file path takes over."""


def streamable(opts: LogOptions) -> str | None:
    """Why `opts` need the whole-file path, or None when the block path can condition with them."""
    if opts.windows:
        return "time windows"
    if opts.delay is not None and np.any(np.asarray(opts.delay) != 0):
        return "a torque delay"
    if opts.period and opts.average:
        return "period averaging"
    return None


def overlap(plan: JointPlan) -> int:
    """Samples each block is extended by on both sides so its result equals the whole segment's."""
    ov = 16 + 2 * plan.window + max(plan.stuck_len, plan.margin, plan.spread, 1)
    if plan.cutoff:
        ov += cond.settle_samples(plan.fs, plan.cutoff, plan.order)
        ov += cond.pad_length(plan.m, plan.fs, plan.cutoff)
    if plan.lite:
        ov += cond.settle_samples(plan.fs, plan.sign_cut, plan.order)
    return int(ov)


def _release_arrow() -> None:
    """Hand pyarrow's cached buffers back to the system (its allocator keeps what a read freed)."""
    try:
        import pyarrow as pa

        pa.default_memory_pool().release_unused()
    except (ImportError, AttributeError):  # pragma: no cover - older pyarrow
        pass


def extremes(tau: np.ndarray, q: np.ndarray, offset: int, into=None):
    """Running extremes of rows of a log for the plausibility check: ``(tau_max, q_max, q_min,
    i_max, i_min)`` (n,) each, the rows counted in the file from `offset`; `into`: those of the
    rows before, updated (the first row holding an extreme is kept, as argmax gives)."""
    n = q.shape[1]
    if into is None:
        into = (np.zeros(n), np.full(n, -np.inf), np.full(n, np.inf), np.zeros(n, dtype=np.int64), np.zeros(n, dtype=np.int64))
    tau_max, q_max, q_min, i_max, i_min = into
    bmax, bmin = q.max(axis=0), q.min(axis=0)
    up, dn = bmax > q_max, bmin < q_min
    i_max = np.where(up, offset + np.argmax(q, axis=0), i_max)
    i_min = np.where(dn, offset + np.argmin(q, axis=0), i_min)
    return np.maximum(tau_max, np.abs(tau).max(axis=0)), np.maximum(q_max, bmax), np.minimum(q_min, bmin), i_max, i_min


def merge_extremes(parts):
    """The extremes of consecutive row ranges (each from :func:`extremes`), in file order."""
    tau_max, q_max, q_min, i_max, i_min = (np.array(x, copy=True) for x in parts[0])
    for t2, qx, qn, ix, jn in parts[1:]:
        up, dn = np.asarray(qx) > q_max, np.asarray(qn) < q_min
        i_max, i_min = np.where(up, ix, i_max), np.where(dn, jn, i_min)
        tau_max, q_max, q_min = np.maximum(tau_max, t2), np.maximum(q_max, qx), np.minimum(q_min, qn)
    return tau_max, q_max, q_min, i_max, i_min


def check_extremes(source: str, joint_names, limit, warnings: list, ext, robot) -> None:
    """:func:`ident.data.checks.check_plausible` from a log's extremes (:func:`extremes`): the
    same errors (naming the file's data row) and warnings (appended to `warnings`)."""
    if robot is None:
        return
    tau_max, q_max, q_min, i_max, i_min = ext
    n = len(joint_names)
    # two rows per joint hold every extreme the check looks at: the largest |tau| is its own row
    tau = np.vstack([tau_max, -tau_max])
    q = np.empty((2, n))
    q[0], q[1] = q_max, q_min
    raw = RawLog(source, joint_names, np.arange(2.0), q, None, None, tau, limit, warnings)
    try:
        check_plausible(raw, robot)
    except DataError as exc:
        # the check names a row of its two-row stand-in: put the file's row back
        msg = str(exc)
        for k in range(n):
            for r, i in ((1, i_max[k]), (2, i_min[k])):
                tag = f"joint '{joint_names[k]}' position"
                if tag in msg and f"at data row {r} " in msg:
                    raise DataError(msg.replace(f"at data row {r} ", f"at data row {int(i) + 1} ")) from None
        raise


class _RawStore:
    """One file's validated raw SI channels on disk, with the reductions the plausibility check needs."""

    def __init__(self, spill: Spill, plan, fmt: str, block: int):
        from .tables import iter_table_blocks

        n = len(plan.joint_names)
        self.source = str(plan.path)
        self.joint_names = plan.joint_names
        self.limit = plan.limit
        self.warnings = list(plan.warnings)
        self.t = spill.array(())
        self.ch = {}
        self.rows = 0
        first = None
        ext = None
        for blocks, (offset, t, arrays) in enumerate(iter_table_blocks(plan, fmt, block), start=1):
            if first is None:
                first = float(t[0])
                for c in CHANNELS:
                    # one file per joint: the statistics pass reads one joint's long stretch at a time
                    self.ch[c] = None if arrays[c] is None else [spill.array(()) for _ in range(n)]
            self.t.append(t)
            for c in CHANNELS:
                if arrays[c] is not None:
                    for k, f in enumerate(self.ch[c]):
                        f.append(arrays[c][:, k])
            ext = extremes(arrays["tau"], arrays["q"], offset, ext)
            self.rows = offset + t.shape[0]
            self.t_last = float(t[-1])
            if blocks % 8 == 0:
                _release_arrow()
        self.t_first = first
        self.t.finish()
        for fs in self.ch.values():
            for f in fs or ():
                f.finish()
        self._extremes = ext

    def check_plausible(self, robot) -> None:
        """:func:`ident.data.checks.check_plausible` from the streamed extremes (same messages)."""
        check_extremes(self.source, self.joint_names, self.limit, self.warnings, self._extremes, robot)

    def read(self, name: str, a: int, b: int):
        """Rows a..b-1 of "t" (m,) or of a channel (m, n), None when not logged."""
        if name == "t":
            return self.t.read(a, b)
        if self.ch[name] is None:
            return None
        return np.stack([f.read(a, b) for f in self.ch[name]], axis=1)

    def close(self) -> None:
        """Delete the stored raw channels (after the file is conditioned)."""
        self.t.remove()
        for fs in self.ch.values():
            for f in fs or ():
                f.remove()

    def read_col(self, name: str, k: int, a: int, b: int):
        """Rows a..b-1 of joint k's channel `name` (m,), None when not logged."""
        return None if self.ch[name] is None else self.ch[name][k].read(a, b)


def _pieces(raw: _RawStore, opts: LogOptions, warnings: list[str], counts: dict, block: int):
    """Gaps split the file into uniform pieces [(start, stop, dt)] (as :func:`uniform_pieces` does)."""
    head = raw.read("t", 0, min(raw.rows, STAT_SAMPLES + 1))
    nominal = sample_step(head)
    gaps, longest, first_gap_t = [], 0.0, None
    for a in range(0, raw.rows - 1, block):
        t = raw.read("t", a, min(raw.rows, a + block + 1))
        d = np.diff(t)
        g = np.flatnonzero(d > opts.max_gap * nominal)
        if g.size:
            if first_gap_t is None:
                first_gap_t = float(t[g[0]])
            longest = max(longest, float(d[g].max()))
            gaps += [a + int(x) for x in g]
    if gaps:
        warnings.append(f"{raw.source}: {len(gaps)} gap(s) longer than {opts.max_gap:g} sample steps (longest {longest:.4g} s at t = {first_gap_t:.6g} s); data split into segments")
    edges = [0] + [g + 1 for g in gaps] + [raw.rows]
    out = []
    for s, e in itertools.pairwise(edges):
        if e - s < 2:
            counts["short"] += e - s
            continue
        step = sample_step(raw.read("t", s, min(e, s + STAT_SAMPLES + 1)))
        dev = 0.0
        for a in range(s, e - 1, block):
            dts = np.diff(raw.read("t", a, min(e, a + block + 1)))
            dev = max(dev, float(np.max(np.abs(dts - step))) / step)
        if dev > opts.jitter:
            raise NotStreamable("irregular sampling")
        out.append((s, e, step))
    return out


def _runs_of(mask: np.ndarray, offset: int) -> list[list[int]]:
    if not mask.any():
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return [[offset + int(a), offset + int(b)] for a, b in zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1))]


def _merge_runs(runs: list[list[int]]) -> list[list[int]]:
    out: list[list[int]] = []
    for a, b in sorted(runs):
        if out and a <= out[-1][1]:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return out


def _subtract(base: tuple[int, int], holes: list[list[int]]) -> list[tuple[int, int]]:
    a0, b0 = base
    out, cur = [], a0
    for a, b in holes:
        if b <= cur or a >= b0:
            continue
        if a > cur:
            out.append((cur, min(a, b0)))
        cur = max(cur, b)
    if cur < b0:
        out.append((cur, b0))
    return out


class _PeriodNoise:
    """Per-joint torque and position noise from the spread between whole periods, accumulated
    period by period (the streamed form of ``_period_noise`` in :mod:`ident.data.segments`)."""

    def __init__(self, Li: int, P: int, clipped_runs, n: int):
        self.Li, self.P = Li, P
        self.skip = set()
        for a, b in clipped_runs:
            self.skip.update(range(a // Li, min(P, (b - 1) // Li + 1)))
        self.buf_q = np.empty((Li, n))
        self.buf_tau = np.empty((Li, n))
        self.fill = 0
        self.period = 0
        self.used = 0
        self.ref = None
        self.s1 = self.s2 = None

    def add(self, q: np.ndarray, tau: np.ndarray) -> None:
        """Rows of the segment in order (raw q and torque)."""
        k = 0
        while k < q.shape[0] and self.period < self.P:
            take = min(self.Li - self.fill, q.shape[0] - k)
            self.buf_q[self.fill : self.fill + take] = q[k : k + take]
            self.buf_tau[self.fill : self.fill + take] = tau[k : k + take]
            self.fill += take
            k += take
            if self.fill == self.Li:
                # the first period holds the start-up transient of a closed loop: not used
                if self.period >= 1 and self.period not in self.skip:
                    x = np.stack([self.buf_tau, self.buf_q])
                    if self.ref is None:
                        self.ref = x.copy()
                        self.s1 = np.zeros_like(x)
                        self.s2 = np.zeros_like(x)
                    d = x - self.ref  # sums about the first period used: noise-sized, no cancellation
                    self.s1 += d
                    self.s2 += d * d
                    self.used += 1
                self.fill = 0
                self.period += 1

    def result(self):
        """(var_tau, dof, var_q) or None when fewer than two periods were usable."""
        P = self.used
        if P < 2:
            return None
        m2 = self.s2 - self.s1 * self.s1 / P  # (2, L, n) sums of squares about the period mean
        var = m2.mean(axis=1) / (P - 1)
        return var[0], P - 1, var[1]


def check_rate(cutoff, dt: float, opts: LogOptions, where: str) -> None:
    """The cutoff (Hz) must sit below the Nyquist frequency of the step `dt` (s), and a decimation
    factor must not alias (the low-pass is its anti-alias filter); errors name `where`."""
    fs = 1.0 / dt
    if cutoff and cutoff >= 0.5 * fs:
        hint = f" (a {dt:g} s sample step: time in ms? set time.unit in a log profile)" if dt >= 0.5 else ""
        raise DataError(f"cutoff: {cutoff:g} Hz is not below the Nyquist frequency {0.5 * fs:g} Hz of {where}{hint}")
    if opts.decimate > 1:
        try:
            cond.decimate(np.zeros(1), opts.decimate, fs, cutoff)
        except DataError as exc:
            raise DataError(f"{where}: {exc}") from None


def trim_samples(opts: LogOptions, cutoff, fs: float, m: int) -> int:
    """Samples trimmed at each end of a piece of `m` samples (raises :class:`NotStreamable` when
    the trims leave too little: the whole-file path then skips the piece with its warning)."""
    trim = round((opts.trim if opts.trim is not None else 2.0 / cutoff) * fs) if cutoff else round((opts.trim or 0.0) * fs)
    if 2 * trim + 3 > m:
        raise NotStreamable("trim longer than the segment")
    return int(trim)


def check_logged(opts: LogOptions, source: str, has_dq: bool, has_ddq: bool, cutoff) -> None:
    """Refuse options that want logged velocities or accelerations a log does not hold, or
    derivatives without a cutoff."""
    if opts.logged_velocity and not has_dq:
        raise DataError(f"{source}: logged_velocity is set but the log has no velocity")
    if opts.logged_acceleration and not has_ddq:
        raise DataError(f"{source}: logged_acceleration is set but the log has no acceleration")
    need = not (opts.logged_velocity and has_dq) or not (opts.logged_acceleration and has_ddq)
    if need and cutoff is None:
        raise DataError("no low-pass cutoff: give cutoff (Hz), or the excitation's max_frequency or period and harmonics, or cutoff 0 for no filtering")


def piece_zones(plan: JointPlan, read_col, s: int, n: int, thresholds=None) -> list[tuple[float, float]]:
    """Per joint the (slow-zone, noise-zone) velocities of the piece starting at row `s`, from
    its first :data:`STAT_SAMPLES` samples filtered with the look-ahead they need;
    ``read_col(channel, k, a, b)`` reads rows of one joint's raw channel. `thresholds` (n,)
    collects the largest slow-zone velocity per joint."""
    m = plan.m
    S = min(m, STAT_SAMPLES)
    w = min(m, S + overlap(plan))
    zones = []
    for k in range(n):
        _, v, v_sign, a_ = plan.signals(*(read_col(c, k, s, s + w) for c in ("q", "dq", "ddq")))
        thr, still = plan.thresholds(v[:S], v_sign[:S], a_[:S])
        if thresholds is not None:
            thresholds[k] = max(thresholds[k], thr)
        zones.append((thr, still))
        del v, v_sign, a_
    return zones


def condition_rows(plan: JointPlan, win: dict, rows: np.ndarray, zones) -> tuple[dict, np.ndarray, np.ndarray, np.ndarray]:
    """Condition a window of a piece's raw rows and keep the rows `rows` (indices into the
    window): ``({q, dq, ddq, tau: (k, n)}, slow (k, n), stuck (k, n), dry (k, n, 4))``. The window
    must reach :func:`overlap` samples beyond the kept rows on each side (or the piece's end)
    for the result to equal the whole piece's (module notes). win : {channel: (w, n) or None}."""

    def col(x, k):
        return None if x is None else np.ascontiguousarray(x[:, k])

    n = win["q"].shape[1]
    k_out = rows.shape[0]
    out = {c: np.empty((k_out, n)) for c in CHANNELS}
    slow = np.empty((k_out, n), dtype=bool)
    stuck = np.empty((k_out, n), dtype=bool)
    dry = np.empty((k_out, n, 4))
    for k in range(n):
        qf, v, v_sign, a_ = plan.signals(col(win["q"], k), col(win["dq"], k), col(win["ddq"], k))
        flag, stuck_k = plan.flags(v, v_sign, *zones[k])
        out["q"][:, k] = qf[rows]
        out["dq"][:, k] = v[rows]
        out["ddq"][:, k] = a_[rows]
        slow[:, k] = flag[rows]
        stuck[:, k] = stuck_k[rows]
        plan.dry_signals(v_sign, dry, k, rows)
        out["tau"][:, k] = plan.filt(col(win["tau"], k))[rows]
        del qf, v, v_sign, a_
    return out, slow, stuck, dry


def selected_count(runs, step: int, x: int) -> int:
    """How many of every `step`-th sample of each run [a, b) (counted from a) lie before row x."""
    return sum(max(0, -(-(min(x, b) - a) // step)) for a, b in runs)


def selected_rows(runs, step: int, c0: int, c1: int) -> np.ndarray:
    """Rows in [c0, c1) of every `step`-th sample of each run [a, b) (counted from a), ascending:
    the samples a block keeps, without an index of the whole piece (8 bytes a sample out)."""
    parts = []
    for a, b in runs:
        lo, hi = max(a, c0), min(b, c1)
        if lo < hi:
            parts.append(np.arange(a + selected_count([(a, b)], step, lo) * step, hi, step))
    return np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64)


def condition_stream(raw: _RawStore, s: int, e: int, opts: LogOptions, cutoff, joint_names, warnings, counts,
                     noise, thresholds, out_files: dict, block: int = BLOCK) -> list:
    """Condition the uniform piece rows s..e-1 of a stored file in overlapping blocks; equals
    :func:`ident.data.segments.condition_segment` on the whole piece (module notes). Returns the
    conditioned segments (on disk, or in memory for a piece no longer than one block)."""
    n = len(joint_names)
    m = e - s
    t0 = float(raw.read("t", s, s + 2)[0])
    t1 = float(raw.read("t", e - 1, e)[0])
    dt = float(np.diff(raw.read("t", s, s + 2))[0])
    fs = 1.0 / dt
    need_dq = not (opts.logged_velocity and raw.ch["dq"] is not None)
    need_ddq = not (opts.logged_acceleration and raw.ch["ddq"] is not None)
    plan = JointPlan.make(m, fs, cutoff, opts, False, need_dq, need_ddq)
    ov = overlap(plan)
    if m <= block + 2 * ov:
        seg = Segment(raw.source, *(raw.read(c, s, e) for c in ("t",) + CHANNELS))
        return condition_segment(seg, raw.limit, opts, cutoff, joint_names, warnings, counts, noise, thresholds)
    where = f"{raw.source} (t = {t0:.6g}..{t1:.6g} s)"
    check_rate(cutoff, dt, opts, where)
    # clipped torques: flagged on the raw channel, where the saturation is exact (first pass over tau)
    clip_runs: list[list[int]] = []
    if opts.drop_clipped and np.any(np.isfinite(raw.limit)):
        amax = np.zeros(n)
        hits = [0] * n
        runs_k: list[list[list[int]]] = [[] for _ in range(n)]
        for a in range(0, m, block):
            tau = raw.read("tau", s + a, s + min(m, a + block))
            for k in range(n):
                lim = raw.limit[k]
                if np.isfinite(lim):
                    ab = np.abs(tau[:, k])
                    amax[k] = max(amax[k], float(ab.max()))
                    h = ab >= CLIP_FRACTION * lim
                    hits[k] += int(h.sum())
                    runs_k[k] += _runs_of(h, a)
        for k in range(n):
            lim = raw.limit[k]
            if np.isfinite(lim) and amax[k] <= lim * (2.0 - CLIP_FRACTION) and hits[k]:
                warnings.append(f"{where}: {hits[k]} sample(s) of joint '{joint_names[k]}' at its torque limit {lim:.4g}: dropped")
                clip_runs += runs_k[k]
        clip_runs = _merge_runs(clip_runs)
    pnoise = None
    if opts.period:
        Li = period_samples(opts.period, fs)
        pnoise = _PeriodNoise(Li, m // Li, clip_runs, n)
    trim = trim_samples(opts, cutoff, fs, m)
    base = (0, m)
    if trim:
        base = (trim, m - trim)
        counts["trimmed"] += int(min(m, 2 * trim))
    keep = [base]
    if clip_runs:
        r = max(trim, 1)
        dil = _merge_runs([[max(0, a - r), min(m, b + r)] for a, b in clip_runs])
        counts["clipped"] += sum(max(0, min(b, base[1]) - max(a, base[0])) for a, b in dil)
        keep = _subtract(base, dil)
    runs = [(a, b) for a, b in keep if b - a >= 3]
    counts["short"] += sum(b - a for a, b in keep) - sum(b - a for a, b in runs)
    sel = [len(range(a, b, opts.decimate)) for a, b in runs]  # samples out of each run
    if not sel:
        return []
    counts["decimated"] += sum(b - a for a, b in runs) - sum(sel)
    check_logged(opts, raw.source, raw.ch["dq"] is not None, raw.ch["ddq"] is not None, cutoff)
    zones = piece_zones(plan, raw.read_col, s, n, thresholds)
    start = out_files["t"].rows
    n_slow = n_stuck = 0
    for c0 in range(0, m, block):
        c1 = min(m, c0 + block)
        w0, w1 = max(0, c0 - ov), min(m, c1 + ov)
        picked = selected_rows(runs, opts.decimate, c0, c1)
        rows = picked - w0
        win = {c: raw.read(c, s + w0, s + w1) for c in CHANNELS}
        if pnoise is not None:
            pnoise.add(win["q"][c0 - w0 : c1 - w0], win["tau"][c0 - w0 : c1 - w0])
        out, slow, stuck, dry = condition_rows(plan, win, rows, zones)
        n_slow += int(slow.sum())
        n_stuck += int(stuck.sum())
        out_files["t"].append(raw.read("t", s + c0, s + c1)[picked - c0])
        for c in CHANNELS:
            out_files[c].append(out[c])
        out_files["slow"].append(slow)
        out_files["stuck"].append(stuck)
        out_files["dry"].append(dry)
        del win, out, slow, stuck, dry
    if pnoise is not None:
        r = pnoise.result()
        if r is not None:
            noise.append(r)
    counts["slow"] += n_slow
    counts["stuck"] += n_stuck
    files = dict(out_files)
    if not opts.parallel_friction:
        files["dry"] = None
    segs, off = [], start
    for k_run in sel:
        segs.append((raw.source, files, off, k_run))
        off += k_run
    return [StoredSegment(*a) for a in segs]


def output_files(spill: Spill, n: int) -> dict:
    """Empty on-disk arrays for conditioned samples of n joints (the fields of a Segment)."""
    return {"t": spill.array(()), "q": spill.array((n,)), "dq": spill.array((n,)), "ddq": spill.array((n,)),
            "tau": spill.array((n,)), "slow": spill.array((n,), bool), "stuck": spill.array((n,), bool), "dry": spill.array((n, 4))}


def store_table(spill: Spill, path, fmt: str, robot, prof, block: int = BLOCK) -> _RawStore:
    """Read, validate and store one CSV or Parquet log block by block (errors name file, column, row)."""
    from .tables import table_plan

    raw = _RawStore(spill, table_plan(path, fmt, robot, prof), fmt, min(block, READ_ROWS))
    _release_arrow()
    raw.check_plausible(robot)
    return raw


def pieces(raw: _RawStore, opts: LogOptions, warnings: list[str], counts: dict, block: int = BLOCK):
    """Uniform pieces ``[(start, stop, step)]`` of a stored file (raises :class:`NotStreamable`
    when a piece would need resampling)."""
    return _pieces(raw, opts, warnings, counts, block)


def piece_head(raw: _RawStore, s: int, e: int, name: str = "q") -> np.ndarray:
    """The first :data:`STAT_SAMPLES` rows of a piece (what the data-chosen cutoff looks at)."""
    return raw.read(name, s, min(e, s + STAT_SAMPLES))
