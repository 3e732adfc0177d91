"""From raw samples to conditioned segments: windows, gaps, resampling, then per segment the
parallel zero-phase low-pass on positions and torques, derivatives of the filtered positions, edge
trim, clipped-torque removal, decimation, optional averaging over excitation periods, and
``Segment.slow`` flags where sign(dq) is unreliable for the Coulomb term.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..arm.model import LOW_SPEED_SCALES
from ..errors import DataError
from . import conditioning as cond
from .dataset import STAT_SAMPLES, Segment, sample_step
from .options import LogOptions
from .rawlog import RawLog

#: Default slow zone: |q'| below this many standard deviations of the velocity noise.
SLOW_NOISE_MULTIPLE = 3.0

#: ... and at least the speed a joint passes within this many cutoff periods of a reversal ...
REVERSAL_WINDOW = 0.25

#: ... and, when the threshold is chosen from the data, reaches this many cutoff periods on either
#: side: the low-pass carries an undecided sign that far into the filtered torque, which is then a
#: mixture the friction model cannot follow (measured on the second plant, MuJoCo's UR5 and Panda:
#: the default fit's moving-sample error falls from 1.067x to 1.034x the textbook script's, the
#: all-sample error stays within 1.11 sigma; half a cutoff period starves the low-speed friction
#: shape of its samples, 1.3 sigma).
SLOW_SPREAD = 0.25

#: The held-out check widens the slow zone by this many cutoff periods more: the true model's
#: moving-sample error on the demo's closed-loop log falls from 1.13 to 1.01 of the noise floor on
#: the worst joint (90 % of the forward-backward Butterworth's impulse response lies within 0.76
#: cutoff periods). The fit keeps those equations: a low-speed friction shape learns from them.
SIGN_SPREAD = 0.25

#: ... and never below this fraction of the joint's RMS velocity (noise-free data still need a zone
#: where the sign of a turning joint is undecided at the sample resolution).
MIN_SLOW_FRACTION = 1e-3

#: A torque within this fraction of its saturation level counts as clipped.
CLIP_FRACTION = 0.999



@dataclass
class JointPlan:
    """Per-segment settings of the per-joint conditioning, shared by every block of the segment.

    `m` is the whole segment's length (samples), so a block's filter pads its true segment ends
    exactly as a whole-segment filter does; `lite` says whether the dry-friction velocity comes
    from a separate, lighter low-pass (``sign_cut`` Hz) than the parallel filter (``cutoff`` Hz).
    """

    m: int
    fs: float
    cutoff: float | None
    sign_cut: float | None
    window: int
    need_dq: bool
    need_ddq: bool
    periodic: bool
    margin: int
    stuck_len: int
    spread: int
    order: int
    derivative: str
    slow_velocity: float | None

    @classmethod
    def make(cls, m: int, fs: float, cutoff, opts: LogOptions, periodic: bool, need_dq: bool, need_ddq: bool) -> "JointPlan":
        """The plan of a segment of `m` samples at `fs` Hz conditioned with `cutoff` Hz and `opts`."""
        window = opts.savgol_window or cond.savgol_window(fs, cutoff or 0.25 * fs)
        margin = int(round(opts.reversal_margin * fs)) if opts.reversal_margin else 0
        sign_cut = min(cond.SIGN_CUTOFF_RATIO * cutoff, 0.4 * fs) if cutoff else None
        stuck_len = int(round((opts.stuck_time if opts.stuck_time is not None else max(0.1, 5.0 / cutoff if cutoff else 0.1)) * fs))
        spread = int(round(SLOW_SPREAD / cutoff * fs)) if (cutoff and opts.slow_velocity is None) else 0
        return cls(int(m), float(fs), cutoff, sign_cut, int(window), need_dq, need_ddq, periodic, margin, stuck_len, spread,
                   int(opts.filter_order), opts.derivative, opts.slow_velocity)

    @property
    def lite(self) -> bool:
        return bool(self.sign_cut and self.sign_cut > self.cutoff)

    def filt(self, x: np.ndarray) -> np.ndarray:
        """The parallel low-pass of one column (m,) of the segment, or of a block of it."""
        if not self.cutoff:
            return np.asarray(x, float)
        return cond.lowpass(x, self.fs, self.cutoff, self.order, periodic=self.periodic,
                            padlen=None if self.periodic else cond.pad_length(self.m, self.fs, self.cutoff))

    def signals(self, qk, dqk=None, ddqk=None):
        """Filtered position, velocity, dry-friction velocity and acceleration of one joint: 4 x (m,)."""
        dt = 1.0 / self.fs
        qf = self.filt(qk)
        v = cond.derivative(qf, dt, self.derivative, self.window, self.periodic) if self.need_dq else self.filt(dqk)
        # Velocity for the sign and shape of dry friction: filtered far less, so a reversal sits where
        # the joint really turned; its dry-friction signals then go through the same low-pass as the
        # torque (parallel filtering), and the regressor's Coulomb step is smeared as the torque's is.
        if self.lite:
            src = qk if self.need_dq else dqk
            pad = None if self.periodic else cond.pad_length(self.m, self.fs, self.sign_cut)
            lite = cond.lowpass(src, self.fs, self.sign_cut, self.order, periodic=self.periodic, padlen=pad)
            v_sign = cond.derivative(lite, dt, "central", None, self.periodic) if self.need_dq else lite
        else:
            v_sign = v
        a = cond.derivative(v, dt, self.derivative, self.window, self.periodic) if self.need_ddq else self.filt(ddqk)
        return qf, v, v_sign, a

    def thresholds(self, v, v_sign, a) -> tuple[float, float]:
        """(slow-zone velocity, noise-zone velocity) of one joint from its statistics samples."""
        # slow zone: where the velocity is within its own noise of zero, sign(q') is a coin toss; and
        # within a quarter cutoff period of a reversal the low-pass cannot resolve what friction does
        # there (stick-slip, breakaway), so those speeds leave the dry-friction rows too
        dv = v_sign - v
        noise_v = 1.4826 * float(np.median(np.abs(dv - np.median(dv)))) if self.lite else 0.0
        still = max(SLOW_NOISE_MULTIPLE * noise_v, MIN_SLOW_FRACTION * float(np.sqrt(np.mean(v * v))))
        turns = np.flatnonzero(np.diff(np.signbit(v).astype(np.int8)) != 0)
        blur = REVERSAL_WINDOW / self.cutoff * float(np.median(np.abs(a[turns]))) if (self.cutoff and turns.size) else 0.0
        thr = float(self.slow_velocity) if self.slow_velocity is not None else max(still, blur)
        return thr, still

    def flags(self, v, v_sign, thr: float, still: float):
        """(slow, stuck) (m,) bool flags of one joint for the given zone velocities."""
        m = v.shape[0]
        low = (np.abs(v_sign) < thr) & (np.abs(v) < thr)
        # stuck: inside the noise zone (whatever slow threshold the user chose) for long enough
        quiet = (np.abs(v_sign) < still) & (np.abs(v) < still)
        stuck_k = np.zeros(m, dtype=bool)
        if self.stuck_len > 1:
            for a_, b_ in _runs(quiet):
                if b_ - a_ >= self.stuck_len:
                    stuck_k[a_:b_] = True
        flag = (_dilate(low, self.spread) if self.spread else low) & ~stuck_k
        if self.margin:
            rev = np.concatenate([np.diff(np.signbit(v).astype(np.int8)) != 0, [False]])
            flag |= _dilate(rev, self.margin) & ~stuck_k
        return flag, stuck_k

    def dry_signals(self, v_sign, dry: np.ndarray, k: int, rows) -> None:
        """Write joint k's filtered dry-friction signals at `rows` into dry (len(rows), n, 4)."""
        dry[:, k, 0] = self.filt(np.sign(v_sign))[rows]
        for i, sc in enumerate(LOW_SPEED_SCALES):
            dry[:, k, 1 + i] = self.filt(np.tanh(v_sign / sc))[rows]


def uniform_pieces(raw: RawLog, opts: LogOptions, warnings: list[str], counts: dict) -> list[Segment]:
    """Apply windows, split at gaps, resample irregular pieces: raw, uniformly sampled segments."""
    t = raw.t
    idx_sets = []
    if opts.windows:
        t0 = t[0]
        for a, b in opts.windows:
            eps = 1e-9 * max(1.0, abs(b))  # unit conversions (ms -> s) must not move a bound sample out
            sel = np.flatnonzero((t - t0 >= a - eps) & (t - t0 <= b + eps))
            if sel.size < 2:
                warnings.append(f"{raw.source}: window [{a:g}, {b:g}] s holds fewer than 2 samples (file lasts {t[-1] - t0:.6g} s); skipped")
                continue
            idx_sets.append((int(sel[0]), int(sel[-1]) + 1))
        counts["outside_windows"] += raw.t.shape[0] - sum(b - a for a, b in idx_sets)
        if not idx_sets:
            raise DataError(f"{raw.source}: no samples inside the time windows {opts.windows}")
    else:
        idx_sets.append((0, t.shape[0]))
    out = []
    nominal_all = sample_step(t)
    for a, b in idx_sets:
        d = np.diff(t[a:b])
        gaps = np.flatnonzero(d > opts.max_gap * nominal_all)
        if gaps.size:
            warnings.append(
                f"{raw.source}: {gaps.size} gap(s) longer than {opts.max_gap:g} sample steps (longest {d[gaps].max():.4g} s at t = {t[a + gaps[0]]:.6g} s); data split into segments"
            )
        edges = [a] + [a + int(g) + 1 for g in gaps] + [b]
        for s, e in zip(edges[:-1], edges[1:]):
            if e - s < 2:
                counts["short"] += e - s
                continue
            ts = t[s:e]
            seg = Segment(raw.source, ts, raw.q[s:e], None if raw.dq is None else raw.dq[s:e],
                          None if raw.ddq is None else raw.ddq[s:e], raw.tau[s:e])
            dts = np.diff(ts)
            step = float(np.median(dts[:STAT_SAMPLES]))
            dev = float(np.max(np.abs(dts - step))) / step
            if dev > opts.jitter:
                seg = _resample(seg, step)
                warnings.append(
                    f"{raw.source}: irregular sampling (step varies by up to {100 * dev:.3g} % around {step:.6g} s) from t = {ts[0]:.6g} s; resampled to a uniform grid by linear interpolation"
                )
            out.append(seg)
    return out


def _resample(seg: Segment, step: float) -> Segment:
    m = int(np.floor((seg.t[-1] - seg.t[0]) / step + 1e-9)) + 1
    tn = seg.t[0] + step * np.arange(m)

    def rs(x):
        if x is None:
            return None
        return np.stack([np.interp(tn, seg.t, x[:, k]) for k in range(x.shape[1])], axis=1)

    return Segment(seg.source, tn, rs(seg.q), rs(seg.dq), rs(seg.ddq), rs(seg.tau))


def _dilate(mask: np.ndarray, r: int) -> np.ndarray:
    """(m,) bool: true within `r` samples of a true entry of `mask` (running sum, O(m) for any r)."""
    c = np.concatenate([[0], np.cumsum(mask, dtype=np.int64)])
    i = np.arange(mask.shape[0])
    return (c[np.minimum(i + r + 1, mask.shape[0])] - c[np.maximum(i - r, 0)]) > 0


def widen_slow(slow: np.ndarray, dt: float, cutoff: float | None) -> np.ndarray:
    """(m, n) bool: the slow flags of one segment (m, n) widened by :data:`SIGN_SPREAD` cutoff
    periods on either side (`dt` s, `cutoff` Hz; unchanged without a cutoff). Where the low-pass
    has carried an undecided sign into the filtered torque and dry-friction columns: the held-out
    check counts these samples as slow, not moving."""
    slow = np.asarray(slow, dtype=bool)
    r = int(round(SIGN_SPREAD / (cutoff * dt))) if cutoff else 0
    if r <= 0 or slow.shape[0] == 0:
        return slow.copy()
    return np.column_stack([_dilate(slow[:, k], r) for k in range(slow.shape[1])])


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """[start, end) index runs where `mask` is true."""
    if not mask.any():
        return []
    d = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def period_samples(period: float, fs: float) -> int:
    """Samples in one excitation period of `period` s at `fs` Hz (a whole number, else an error)."""
    L = period * fs
    Li = int(round(L))
    if abs(L - Li) > 1e-3 * max(1.0, L) or Li < 4:
        raise DataError(f"period: {period:g} s is not a whole number of samples at {fs:g} Hz ({L:.6g}); resample or fix the period")
    return Li


def _period_noise(seg: Segment, tau: np.ndarray, clipped: np.ndarray, opts: LogOptions, fs: float, noise: list) -> None:
    """Per-joint torque and position noise variance from the spread between whole periods, without
    replacing the samples by their average (appended to `noise` as (var_tau, dof, var_q))."""
    Li = period_samples(opts.period, fs)
    P = seg.q.shape[0] // Li
    # the first period holds the start-up transient of a closed loop: the spread is taken over the others
    blocks = [p for p in range(1, P) if not clipped[p * Li : (p + 1) * Li].any()]
    if len(blocks) < 2:
        return
    pick = np.concatenate([np.arange(p * Li, (p + 1) * Li) for p in blocks])
    _, var_tau, Pk = cond.period_average(tau[pick], Li)
    _, var_q, _ = cond.period_average(seg.q[pick], Li)
    noise.append((var_tau, Pk - 1, var_q))


def condition_segment(seg: Segment, limit: np.ndarray, opts: LogOptions, cutoff: float | None, joint_names, warnings, counts, noise, thresholds=None):
    """Filter, differentiate, drop clipped samples and decimate one uniform segment -> list of segments.

    `thresholds` (n,) collects, per joint, the largest slow-zone velocity used (rad/s or m/s).
    """
    if thresholds is None:
        thresholds = np.zeros(seg.q.shape[1])
    m, n = seg.q.shape
    dt = float(seg.t[1] - seg.t[0])
    fs = 1.0 / dt
    where = f"{seg.source} (t = {seg.t[0]:.6g}..{seg.t[-1]:.6g} s)"
    if cutoff and cutoff >= 0.5 * fs:
        # a controller logs at tens of Hz or more: a sample step of a second or longer means ms read as s
        hint = f" (a {dt:g} s sample step: time in ms? set time.unit in a log profile)" if dt >= 0.5 else ""
        raise DataError(f"cutoff: {cutoff:g} Hz is not below the Nyquist frequency {0.5 * fs:g} Hz of {where}{hint}")
    if opts.decimate > 1:
        try:  # the low-pass is the anti-alias filter: refuse a factor that would alias
            cond.decimate(seg.t[:1], opts.decimate, fs, cutoff)
        except DataError as exc:
            raise DataError(f"{where}: {exc}") from None
    tau = seg.tau
    # clipped torques: flagged on the raw channel, where the saturation is exact
    clipped = np.zeros(m, dtype=bool)
    if opts.drop_clipped:
        for k in range(n):
            lim = limit[k]
            if np.isfinite(lim):
                a = np.abs(tau[:, k])
                if a.max() <= lim * (2.0 - CLIP_FRACTION):
                    hit = a >= CLIP_FRACTION * lim
                    if hit.any():
                        warnings.append(f"{where}: {int(hit.sum())} sample(s) of joint '{joint_names[k]}' at its torque limit {lim:.4g}: dropped")
                        clipped |= hit
    if opts.delay is not None and np.any(np.asarray(opts.delay) != 0):
        d = np.broadcast_to(np.asarray(opts.delay, float), (n,))
        tau, valid = cond.shift(seg.t, tau, d)
        clipped |= ~valid
        counts["delay_edges"] += int((~valid).sum())
    q, dq_log, ddq_log = seg.q, seg.dq, seg.ddq
    periodic = False
    if opts.period and not opts.average:
        _period_noise(seg, tau, clipped, opts, fs, noise)
    if opts.period and opts.average:
        Li = period_samples(opts.period, fs)
        P = m // Li
        if P < 2:
            warnings.append(f"{where}: shorter than two periods of {opts.period:g} s; segment skipped for period averaging")
            counts["short"] += m
            return []
        keep_blocks = [p for p in range(P) if not clipped[p * Li : (p + 1) * Li].any()]
        if len(keep_blocks) < 2:
            raise DataError(f"{where}: fewer than two periods free of clipped torque; cannot average")
        counts["clipped"] += int(clipped[: P * Li].sum())
        counts["partial_period"] += m - P * Li
        counts["averaged_out"] += (len(keep_blocks) - 1) * Li

        def blocks(x):
            return None if x is None else np.concatenate([x[p * Li : (p + 1) * Li] for p in keep_blocks])

        tau_mean, var_tau, Pk = cond.period_average(blocks(tau), Li)
        q_mean, var_q, _ = cond.period_average(blocks(q), Li)
        spread = np.ptp(q_mean, axis=0)
        bad = [joint_names[k] for k in range(n) if np.sqrt(var_q[k]) > 0.01 * max(spread[k], 1e-9)]
        if bad:
            warnings.append(f"{where}: positions of {', '.join(bad)} differ between periods by more than 1 % of their range: is the period {opts.period:g} s right and the data periodic?")
        noise.append((var_tau, Pk - 1, var_q))
        dq_log = None if dq_log is None else cond.period_average(blocks(dq_log), Li)[0]
        ddq_log = None if ddq_log is None else cond.period_average(blocks(ddq_log), Li)[0]
        q, tau = q_mean, tau_mean
        t = seg.t[0] + dt * np.arange(Li)
        m = Li
        clipped = np.zeros(m, dtype=bool)
        periodic = True
    else:
        t = seg.t
    # edge trimming and clipped neighbourhoods, decided before the heavy work so it runs once per column
    if periodic or not cutoff:
        trim = 0 if periodic else int(round((opts.trim or 0.0) * fs))
    else:
        trim = int(round((opts.trim if opts.trim is not None else 2.0 / cutoff) * fs))
    if not periodic and cutoff and m < max(cond.min_filter_samples(opts.filter_order), 2 * trim + 3):
        if 2 * trim + 3 > m and opts.trim is not None:
            warnings.append(f"{where}: trim {opts.trim:g} s at both ends leaves nothing of its {m * dt:.6g} s (option trim); skipped")
        else:
            warnings.append(f"{where}: only {m} samples, too short to filter; skipped")
        counts["short"] += m
        return []
    keep = np.ones(m, dtype=bool)
    if trim:
        keep[:trim] = False
        keep[m - trim :] = False
        counts["trimmed"] += int(min(m, 2 * trim))
    if clipped.any():
        spread_n = max(trim, 1)
        dil = _dilate(clipped, spread_n)
        counts["clipped"] += int((dil & keep).sum())
        keep &= ~dil
    runs = [(a, b) for a, b in _runs(keep) if b - a >= 3]
    counts["short"] += int(keep.sum()) - sum(b - a for a, b in runs)
    sel = [np.arange(a, b, opts.decimate) for a, b in runs]
    if not sel:
        if trim and opts.trim is not None and 2 * trim >= m:
            warnings.append(f"{where}: trim {opts.trim:g} s at both ends leaves nothing of its {m * dt:.6g} s (option trim); skipped")
        return []
    counts["decimated"] += sum(b - a for a, b in runs) - sum(len(s) for s in sel)
    allsel = np.concatenate(sel)

    need_dq = not (opts.logged_velocity and dq_log is not None)
    need_ddq = not (opts.logged_acceleration and ddq_log is not None)
    if opts.logged_velocity and dq_log is None:
        raise DataError(f"{seg.source}: logged_velocity is set but the log has no velocity")
    if opts.logged_acceleration and ddq_log is None:
        raise DataError(f"{seg.source}: logged_acceleration is set but the log has no acceleration")
    if (need_dq or need_ddq) and cutoff is None:
        raise DataError(
            "no low-pass cutoff: give cutoff (Hz), or the excitation's max_frequency or period and harmonics, or cutoff 0 for no filtering"
        )
    plan = JointPlan.make(m, fs, cutoff, opts, periodic, need_dq, need_ddq)
    out = {k: np.empty((allsel.size, n)) for k in ("q", "dq", "ddq", "tau")}
    slow = np.empty((allsel.size, n), dtype=bool)
    stuck = np.zeros((allsel.size, n), dtype=bool)
    dry = np.empty((allsel.size, n, 4))
    S = STAT_SAMPLES
    for k in range(n):  # one joint at a time keeps the temporaries to a few columns
        qf, v, v_sign, a = plan.signals(q[:, k], None if dq_log is None else dq_log[:, k], None if ddq_log is None else ddq_log[:, k])
        thr, still = plan.thresholds(v[:S], v_sign[:S], a[:S])
        thresholds[k] = max(thresholds[k], thr)
        flag, stuck_k = plan.flags(v, v_sign, thr, still)
        out["q"][:, k] = qf[allsel]
        out["dq"][:, k] = v[allsel]
        slow[:, k] = flag[allsel]
        stuck[:, k] = stuck_k[allsel]
        plan.dry_signals(v_sign, dry[:, :, :], k, allsel)
        out["ddq"][:, k] = a[allsel]
        out["tau"][:, k] = plan.filt(tau[:, k])[allsel]
        del qf, v, a
    counts["slow"] += int(slow.sum())
    counts["stuck"] += int(stuck.sum())
    segs = []
    off = 0
    for s in sel:
        sl = slice(off, off + len(s))
        off += len(s)
        segs.append(Segment(seg.source, t[s], out["q"][sl], out["dq"][sl], out["ddq"][sl], out["tau"][sl], slow[sl], stuck[sl],
                            dry[sl] if opts.parallel_friction else None))
    return segs
