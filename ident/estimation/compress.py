"""Streaming compression of the identification problem: per-joint triangular factors.

For joint j the rows of the base regressor and the measured torque, ``[Y_b,j | tau_j]`` (N, b+1),
are reduced chunk by chunk to the upper triangle ``T_j`` of their QR factorization: the chunk is
stacked under the current triangle and re-factored (Householder QR, LAPACK ``dgeqrf``), so the
memory never grows with N and the result is exactly as stable as a QR of the whole stacked
matrix. Since ``||[Y | tau] [beta; -1]||^2 = ||T [beta; -1]||^2`` for every beta, everything
downstream (OLS, WLS, the consistent SDP, residuals) works on the triangles alone.

Why one triangle per joint: weighted least squares scales each joint's rows by ``1/sigma_j``,
and ``sigma_j`` is only known after a first fit. Keeping the joints apart lets both fits come
from one pass over the data (stack ``T_j / sigma_j`` afterwards). It is also faster: joint j's
rows are zero outside the columns of the bodies it carries and its own terms, so its triangle
only spans those ``c_j`` columns (the QR cost falls with ``c_j^2``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.linalg import lapack

from ..arm.base import BaseParameters, base_parameters
from ..arm.dynamics import term_columns
from ..arm.model import DRY_FRICTION_TERMS, Robot, parse_terms
from ..arm.regressor import iter_regressor, set_term_columns
from ..blas import single_thread_blas  # noqa: F401  (re-exported for the estimators)
from ..errors import DataError, IdentError, NumericalError
from .blocks import MAX_BLOCKS, BlockStore, block_length, block_ranges, merge_triangles

#: Samples per regressor chunk during compression (a 7-joint, 91-column chunk is ~42 MB).
CHUNK = 8192


def joint_columns(robot: Robot, bp: BaseParameters) -> list[np.ndarray]:
    """Base columns that can be non-zero in joint j's rows, for each joint: (c_j,) int indices.

    Joint j's torque depends on the inertial parameters of the bodies it carries (those with j on
    their path to the base) and on its own joint terms only.
    """
    n = robot.n
    n_terms = len(bp.terms)
    out = []
    for j in range(n):
        keep = []
        for k, f in enumerate(bp.independent):
            if f < 10 * n:
                if robot.ancestors[f // 10, j]:
                    keep.append(k)
            elif (f - 10 * n) // n_terms == j:
                keep.append(k)
        out.append(np.array(keep, dtype=np.int64))
    return out


def fold_rows(T: np.ndarray, A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Upper triangle of the QR factor of ``[T; [A | b]]``: T (c+1, c+1), A (m, c), b (m,).

    ``||[A | b] [x; -1]||^2`` is thereby added to the quadratic form that T stands for.
    """
    c = A.shape[1]
    M = np.empty((c + 1 + A.shape[0], c + 1), order="F")
    M[: c + 1] = T
    M[c + 1 :, :c] = A
    M[c + 1 :, c] = b
    qr, _, _, info = lapack.dgeqrf(M, overwrite_a=1)
    if info != 0:  # pragma: no cover - LAPACK argument error
        raise NumericalError(f"QR of the regressor chunk failed (LAPACK info {info})")
    return np.triu(qr[: c + 1])


@dataclass
class Reduced:
    """The compressed problem ``min ||R beta - z||^2 + rho^2`` (b unknowns).

    R (b, b) upper triangular; z (b,); rho the residual norm no beta can remove (same units as the
    weighted torque); rows the number of scalar equations it stands for.
    """

    R: np.ndarray
    z: np.ndarray
    rho: float
    rows: int


class Compressor:
    """Accumulates the per-joint triangles of ``[Y_b | tau]`` over any number of logs.

    Parameters
    ----------
    robot : the model.
    terms : joint-term codes carried by the regressor.
    base : base parameters to use (default: :func:`ident.arm.base.base_parameters` of robot, terms).
    chunk : samples per regressor chunk.
    block : samples per time block kept for the block jackknife (default: each log added is cut
        into :data:`ident.estimation.blocks.MIN_BLOCKS` blocks; :func:`compress` applies the block
        rule of :mod:`ident.estimation.blocks`).
    keep_blocks : keep the per-block triangles (False: totals only; no block jackknife).
    max_blocks : cap on the number of blocks kept (adjacent blocks are merged beyond it).

    Attributes
    ----------
    triangles : list of (c_j + 1, c_j + 1) upper triangles, one per joint, over the columns
        ``columns[j]`` of the base set plus the torque.
    samples : total samples added; sources : labels of the logs added, in order.
    blocks : :class:`ident.estimation.blocks.BlockStore` of per-block triangles (None without
        `keep_blocks`); the totals are the merge of the blocks.
    """

    def __init__(self, robot: Robot, terms=(), base: BaseParameters | None = None, chunk: int = CHUNK,
                 block: int | None = None, keep_blocks: bool = True, max_blocks: int = MAX_BLOCKS):
        self.robot = robot
        self.terms = parse_terms(terms)
        self.base = base if base is not None else base_parameters(robot, self.terms)
        if tuple(self.base.terms) != self.terms:
            raise IdentError(f"base parameters were computed for terms {list(self.base.terms)}, not {list(self.terms)}")
        if chunk < 1:
            raise IdentError(f"chunk: must be a positive number of samples, got {chunk}")
        self.chunk = int(chunk)
        self.columns = joint_columns(robot, self.base)
        self.triangles = [np.zeros((c.size + 1, c.size + 1)) for c in self.columns]
        self.samples = 0
        self.rows = np.zeros(robot.n, dtype=np.int64)
        self.sources: list[str] = []
        self.sum_tau2 = np.zeros(robot.n)
        if block is not None and block < 1:
            raise IdentError(f"block: must be a positive number of samples, got {block}")
        if max_blocks < 2:
            raise IdentError(f"max_blocks: must be at least 2, got {max_blocks}")
        self.block = None if block is None else int(block)
        self.blocks = BlockStore(max_blocks) if keep_blocks else None

    @property
    def n_base(self) -> int:
        """Number of base parameters b."""
        return self.base.n_base

    def add(self, q, dq, ddq, tau, source: str = "", progress=None, keep=None, term_signals=None, block: int | None = None,
            dt: float | None = None) -> "Compressor":
        """Fold one log into the triangles.

        Parameters
        ----------
        q, dq, ddq : (N, n) joint positions (rad or m), velocities, accelerations.
        tau : (N, n) measured joint torques (N m) or forces (N).
        source : label of the log (kept in :attr:`sources`, used in messages).
        progress : optional callable ``progress(samples_done_in_this_log)``.
        keep : optional (N, n) bool: which joint equations to use (False drops joint j's equation
            at that sample only, e.g. where the velocity is too small for sign(q') to be trusted).
        term_signals : optional (N, n, k) joint-term columns, in the order of :attr:`terms`, that
            replace the ones the regressor computes from q', q'' (e.g. dry-friction columns
            filtered like the torque, :func:`ident.arm.dynamics.term_columns`).
        block : samples per time block of this log (default: the compressor's `block`, else a
            twentieth of the log). dt : sample step (s), only to report block durations.
        """
        where = source or "data"
        try:
            q, dq, ddq, tau = self.robot.check_states(q, dq, ddq, tau, names=("q", "dq", "ddq", "tau"))
        except IdentError as exc:
            raise DataError(f"{where}: {exc}") from None
        if keep is not None:
            keep = np.asarray(keep, dtype=bool)
            if keep.shape != q.shape:
                raise DataError(f"{where}: sample mask has shape {keep.shape}, expected {q.shape}")
            if keep.all():
                keep = None
        k = len(self.terms)
        if term_signals is not None:
            term_signals = np.asarray(term_signals, dtype=float)
            if term_signals.shape != q.shape + (k,) or not np.all(np.isfinite(term_signals)):
                raise DataError(f"{where}: joint-term signals must be finite with shape {q.shape + (k,)}, got {term_signals.shape}")
        with single_thread_blas():
            ts = term_signals
            if self.blocks is None:
                self._fold_range(self.triangles, q, dq, ddq, tau, keep, progress, 0, ts)
            else:
                N = q.shape[0]
                L = block if block is not None else (self.block or block_length([N]))
                step = float(dt) if dt else float("nan")
                for a, b in block_ranges(N, L):
                    tri = [np.zeros_like(T) for T in self.triangles]
                    kb = None if keep is None else keep[a:b]
                    self._fold_range(tri, q[a:b], dq[a:b], ddq[a:b], tau[a:b], kb, progress, a, None if ts is None else ts[a:b])
                    rows = np.full(self.robot.n, b - a, dtype=np.int64) if kb is None else kb.sum(axis=0)
                    self.triangles = [merge_triangles(T, B) for T, B in zip(self.triangles, tri)]
                    self.blocks.append(tri, rows, (b - a) * step)
        self.samples += q.shape[0]
        self.rows += q.shape[0] if keep is None else keep.sum(axis=0)
        self.sources.append(source)
        t2 = tau * tau if keep is None else np.where(keep, tau * tau, 0.0)
        self.sum_tau2 += t2.sum(axis=0)
        return self

    def _fold_range(self, tri: list[np.ndarray], q, dq, ddq, tau, keep, progress, offset: int, term_signals=None) -> None:
        """Fold the samples of one stretch into the per-joint triangles `tri` (in place)."""
        for sl, Y in iter_regressor(self.robot, q, dq, ddq, self.terms, self.chunk):
            if term_signals is not None:
                set_term_columns(Y, term_signals[sl])
            self._fold(tri, Y, tau[sl], None if keep is None else keep[sl])
            if progress is not None:
                progress(offset + sl.stop)

    def _fold(self, tri: list[np.ndarray], Y: np.ndarray, tau: np.ndarray, keep=None) -> None:
        indep = self.base.independent
        for j, cols in enumerate(self.columns):
            if keep is None:
                tri[j] = fold_rows(tri[j], Y[:, j, indep[cols]], tau[:, j])
            else:
                rows = np.flatnonzero(keep[:, j])
                if rows.size:
                    tri[j] = fold_rows(tri[j], Y[rows, j][:, indep[cols]], tau[rows, j])

    def merge(self, other: "Compressor") -> "Compressor":
        """Fold another compressor's triangles (same robot, terms and base set) into this one.

        Its time blocks are appended after this one's (both must keep blocks, or the result keeps none).
        """
        if other.base.names != self.base.names or other.robot.joint_names != self.robot.joint_names:
            raise IdentError("cannot merge compressed data of different models or base sets")
        for j in range(self.robot.n):
            self.triangles[j] = merge_triangles(self.triangles[j], other.triangles[j])
        if self.blocks is not None and other.blocks is not None:
            self.blocks.extend(other.blocks)
        else:
            self.blocks = None
        self.samples += other.samples
        self.rows += other.rows
        self.sources += other.sources
        self.sum_tau2 += other.sum_tau2
        return self

    def joint_rows(self, j: int, weight: float = 1.0) -> np.ndarray:
        """Joint j's triangle embedded in the full base columns: (c_j + 1, b + 1), times `weight`."""
        b = self.n_base
        T = self.triangles[j]
        out = np.zeros((T.shape[0], b + 1))
        out[:, self.columns[j]] = T[:, :-1]
        out[:, b] = T[:, -1]
        return weight * out

    def reduce(self, weights=None) -> Reduced:
        """The combined problem over all joints, each joint's rows scaled by ``weights[j]``
        (default 1): one (b+1) triangle from the stacked per-joint triangles."""
        if self.samples == 0:
            raise DataError("no samples: add at least one log before fitting")
        n, b = self.robot.n, self.n_base
        w = np.ones(n) if weights is None else np.asarray(weights, dtype=float).reshape(n)
        S = np.vstack([self.joint_rows(j, w[j]) for j in range(n)])
        T = scipy.linalg.qr(S, mode="r", check_finite=False)[0][: b + 1]
        if T.shape[0] < b + 1:
            T = np.vstack([T, np.zeros((b + 1 - T.shape[0], b + 1))])
        return Reduced(R=np.triu(T[:b, :b]), z=T[:b, b].copy(), rho=float(abs(T[b, b])), rows=int(self.rows.sum()))

    def joint_rss(self, beta: np.ndarray) -> np.ndarray:
        """Residual sum of squares of each joint for base parameters beta (b,): (n,) in (N m)^2."""
        beta = np.asarray(beta, dtype=float)
        out = np.empty(self.robot.n)
        for j, cols in enumerate(self.columns):
            T = self.triangles[j]
            r = T[:, :-1] @ beta[cols] - T[:, -1]
            out[j] = r @ r
        return out


def compress(robot: Robot, data, terms=(), base: BaseParameters | None = None, progress=None, chunk: int = CHUNK,
             drop_slow: bool | None = None, slow_velocity: float | None = None, block: int | None = None,
             keep_blocks: bool = True) -> Compressor:
    """Compress one or several logs into a :class:`Compressor`.

    Parameters
    ----------
    robot : the model.
    data : a data set (object with ``segments``, each with ``q, dq, ddq, tau`` (m, n) and a
        ``source``), a tuple ``(q, dq, ddq, tau)`` of (N, n) arrays, or a list of those.
    terms : joint-term codes.
    base : base parameters (default: computed for robot and terms).
    progress : optional callable ``progress(samples_done, samples_total)``.
    drop_slow : leave out joint j's equation at samples a data set flags as slow for joint j
        (``Segment.slow``: |q'| within the velocity noise of zero, where sign(q') and so the
        dry-friction columns are unreliable). Default: when a dry-friction term (fc, fcp, fcn,
        fl1..fl3) is among `terms`. Samples a data set flags as stuck (``Segment.stuck``) always
        leave that joint's equations; a data set's filtered dry-friction signals (``Segment.dry``)
        replace the dry-friction columns (parallel filtering).
    slow_velocity : for array input (which carries no such flags): |q'| threshold (rad/s or m/s)
        below which a joint's equation counts as slow. Data sets keep their own flags.
    block : samples per time block for the block jackknife (default: the rule of
        :func:`ident.estimation.blocks.block_length` from the data set's cutoff and sample step,
        or a twentieth of the data for arrays). keep_blocks : False keeps the totals only.
    """
    if slow_velocity is not None and not (np.isfinite(slow_velocity) and slow_velocity >= 0):
        raise IdentError(f"slow_velocity: must be a non-negative number, got {slow_velocity}")
    comp = Compressor(robot, terms, base, chunk, keep_blocks=keep_blocks)
    if drop_slow is None:
        drop_slow = any(c in DRY_FRICTION_TERMS for c in comp.terms)
    segs = list(iter_segments(robot, data, with_slow=True))
    total = sum(s.q.shape[0] for s in segs)
    dt, cutoff = data_timing(data)
    if block is None:
        block = block_length([s.q.shape[0] for s in segs], dt, cutoff)
    elif block < 1:
        raise IdentError(f"block: must be a positive number of samples, got {block}")
    comp.block = int(block)
    done = 0
    for seg in segs:
        cb = None if progress is None else (lambda k, d0=done: progress(d0 + k, total))
        slow = seg.slow
        if slow is None and slow_velocity:
            slow = np.abs(np.asarray(seg.dq, dtype=float)) < slow_velocity
        keep = ~np.asarray(slow, dtype=bool) if (drop_slow and slow is not None) else None
        if seg.stuck is not None:  # a stuck joint's friction is anything up to breakaway: no equation
            keep = ~seg.stuck if keep is None else keep & ~seg.stuck
        signals = None if seg.dry is None else term_columns(comp.terms, seg.dq, seg.ddq, seg.dry)
        comp.add(seg.q, seg.dq, seg.ddq, seg.tau, source=seg.source, progress=cb, keep=keep, term_signals=signals, dt=dt)
        done += seg.q.shape[0]
    return comp


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
    steps = [s.dt for s in data.segments if getattr(s, "t", None) is not None and s.n_samples > 1]
    dt = float(np.median(steps)) if steps else None
    cutoff = getattr(data, "info", {}).get("cutoff")
    return dt, (float(cutoff) if cutoff else None)


def iter_segments(robot: Robot, data, with_slow: bool = False):
    """Yield the segments of a data set, an array tuple ``(q, dq, ddq, tau)``, or a list of those.

    Without `with_slow`: ``(source, q, dq, ddq, tau)`` tuples. With it: :class:`SegmentData`
    records that also carry the segment's slow and stuck flags and filtered dry-friction signals.
    """
    for item in _segments(robot, data):
        yield item if with_slow else (item.source, item.q, item.dq, item.ddq, item.tau)


def _segments(robot: Robot, data):
    if hasattr(data, "segments"):
        names = getattr(data, "joint_names", None)
        if names is not None and list(names) != list(robot.joint_names):
            raise DataError(f"data set joints {list(names)} do not match the model's joints {list(robot.joint_names)} (load it with the robot)")
        for k, seg in enumerate(data.segments):
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
