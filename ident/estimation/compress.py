"""Streaming compression of the identification problem: per-joint triangular factors.

For joint j the rows of the base regressor and the measured torque, ``[Y_b,j | tau_j]`` (N, b+1),
are reduced chunk by chunk to the upper triangle ``T_j`` of their QR factorization, so the memory
never grows with N. Since ``||[Y | tau] [beta; -1]||^2 = ||T [beta; -1]||^2`` for every beta,
everything downstream (OLS, WLS, the consistent SDP, residuals) works on the triangles alone.

Why one triangle per joint: weighted least squares scales each joint's rows by ``1/sigma_j``,
and ``sigma_j`` is only known after a first fit. Keeping the joints apart lets both fits come
from one pass over the data (stack ``T_j / sigma_j`` afterwards). It is also faster: joint j's
rows are zero outside the columns of the bodies it carries and its own terms, so its triangle
only spans those ``c_j`` columns.

**Fused pass.** One compiled kernel (:func:`ident.arm.pack.pack_chunk`) evaluates the regressor
sample by sample and writes only the rows the triangles need, packed per joint; the full
(N, n, p) regressor never exists. A chunk of packed rows is then folded in one of two ways:

* *Householder* (LAPACK ``dgeqrf`` of the chunk stacked under the triangle): backward stable
  whatever the data; about ``2 c_j^2`` flops a row, mostly in level-2 BLAS.
* *Centred Gram*: once the data seen so far determine the base parameters well (a centre
  ``beta_c`` from the triangles, scaled condition number and statistical spread small), the rows
  are formed as ``[Y_b | tau - Y_b beta_c]`` and only their Gram matrix is accumulated (BLAS
  ``dsyrk``, ``c_j^2`` flops a row at level-3 speed). This is one step of iterative refinement
  around ``beta_c`` (the corrected semi-normal equations of Bjorck): forming ``A^T A`` in floating
  point perturbs it by about ``eps |A|^T |A|``, which moves the solution by
  ``eps kappa^2 ||beta - beta_c||`` instead of ``eps kappa^2 ||beta||``, and the residual column
  is residual-sized, so the residual sum of squares is not the difference of two large numbers.
  At the end of the log the Gram matrix is factored (scaled symmetric eigendecomposition, then
  QR, so rank-deficient per-joint blocks are fine), shifted back by the unit triangular column
  operation that undoes the centring, and merged into the triangle by QR.

After a log folded by the Gram route the estimate is checked a posteriori: the bound
``eps (c+1) kappa_s^2 ||D (beta - beta_c)|| / ||D beta||`` on the extra relative error of the base
parameters (``kappa_s`` the scaled condition number, unweighted and with the WLS weights; ``D``
the column norms) and ``eps (c+1) ||r_c,j||^2 / rss_j`` on each joint's residual sum of squares
must stay below :data:`GRAM_TOL`; otherwise that part of the log is folded again by Householder
(a second pass). So the result is never less accurate than the Householder route by more than
that tolerance, and ill-conditioned data get the Householder route. With time blocks kept (block
jackknife) each block is folded into triangles of its own this way, the centre and the checks
using every block folded so far, and then merged into the totals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.linalg import lapack

from ..arm import specialise
from ..arm.base import BaseParameters, base_parameters
from ..arm.dynamics import term_columns
from ..arm.model import DRY_FRICTION_TERMS, Robot, kernel_arrays, parse_terms
from ..arm.pack import pack_chunk
from ..blas import single_thread_blas  # noqa: F401  (re-exported for the estimators)
from ..errors import DataError, IdentError, NumericalError
from .blocks import MAX_BLOCKS, BlockStore, block_length, block_ranges, merge_triangles
from .feed import SegmentData, data_timing, iter_segments, segment_rows, stored_segment  # noqa: F401  (public here too)
from .gram import GRAM_KAPPA, GRAM_TOL, GramRoute, residual_sums  # noqa: F401  (GRAM_*: public here too)

#: Samples per chunk during compression (packed rows of a 7-joint arm: about 1.7 kB a sample).
CHUNK = 2048
#: Folding routes: "auto" (centred Gram where it is accurate, Householder otherwise) or
#: "householder" (always).
FOLDS = ("auto", "householder")


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


class Compressor(GramRoute):
    """Accumulates the per-joint triangles of ``[Y_b | tau]`` over any number of logs.

    Parameters
    ----------
    robot : the model.
    terms : joint-term codes carried by the regressor.
    base : base parameters to use (default: :func:`ident.arm.base.base_parameters` of robot, terms).
    chunk : samples per chunk of the fused pass.
    block : samples per time block kept for the block jackknife (default: each log added is cut
        into :data:`ident.estimation.blocks.MIN_BLOCKS` blocks; :func:`compress` applies the block
        rule of :mod:`ident.estimation.blocks`).
    keep_blocks : keep the per-block triangles (False: totals only; no block jackknife).
    max_blocks : cap on the number of blocks kept (adjacent blocks are merged beyond it).
    fold : "auto" (default: the centred Gram route where its error bound allows, see the module
        notes) or "householder" (QR of every chunk).

    Attributes
    ----------
    triangles : list of (c_j + 1, c_j + 1) upper triangles, one per joint, over the columns
        ``columns[j]`` of the base set plus the torque.
    samples : total samples added; sources : labels of the logs added, in order.
    blocks : :class:`ident.estimation.blocks.BlockStore` of per-block triangles (None without
        `keep_blocks`); the totals are the merge of the blocks.
    folded : samples folded by each route: ``{"householder", "gram", "refolded"}`` (the last are
        samples of a Gram fold that failed its accuracy check and were folded again by QR).
    """

    def __init__(self, robot: Robot, terms=(), base: BaseParameters | None = None, chunk: int = CHUNK,
                 block: int | None = None, keep_blocks: bool = True, max_blocks: int = MAX_BLOCKS, fold: str = "auto"):
        self.robot = robot
        self.terms = parse_terms(terms)
        self.base = base if base is not None else base_parameters(robot, self.terms)
        if tuple(self.base.terms) != self.terms:
            raise IdentError(f"base parameters were computed for terms {list(self.base.terms)}, not {list(self.terms)}")
        if chunk < 1:
            raise IdentError(f"chunk: must be a positive number of samples, got {chunk}")
        if fold not in FOLDS:
            raise IdentError(f"fold: expected one of {', '.join(FOLDS)}, got {fold!r}")
        self.chunk = int(chunk)
        self.fold = fold
        self.folded = {"householder": 0, "gram": 0, "refolded": 0}
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

    def __getstate__(self) -> dict:
        # Pickled to send compressed data between machines: the kernel's packing buffers and
        # caches (megabytes) are rebuilt on first use, so only the triangles and counts travel.
        state = dict(self.__dict__)
        for k in ("_packing", "_buf", "_all_kept", "_cm_for", "_cm", "_rows_now", "_ls_memo", "_special_text", "_special_mod", "_want_special"):
            state.pop(k, None)
        return state

    @property
    def n_base(self) -> int:
        """Number of base parameters b."""
        return self.base.n_base

    def add(self, q, dq, ddq, tau, source: str = "", progress=None, keep=None, term_signals=None, block: int | None = None,
            dt: float | None = None, ranges=None) -> "Compressor":
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
            filtered like the torque, :func:`ident.arm.dynamics.term_columns`). Default: that
            function's columns from q' and q''. The rigid-body columns always come from the kernel.
        block : samples per time block of this log (default: the compressor's `block`, else a
            twentieth of the log). dt : sample step (s), only to report block durations.
        ranges : optional explicit time blocks, a list of [start, stop) sample ranges that tile
            ``range(N)`` in order (overrides `block`; a caller folding one stretch of a longer
            segment passes that stretch's share of the segment's blocks).
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
            keep = None if keep.all() else np.ascontiguousarray(keep)
        if term_signals is not None:
            term_signals = self._check_signals(term_signals, q.shape, where)
        self._rows_now = self.rows.copy()  # equations folded so far, this log's included
        # long logs (this one, or all so far) get the arm's own kernel once it is compiled; its
        # rows are bit for bit the general kernel's, so when the switch happens changes nothing
        self._want_special = specialise.enabled() and self.samples + q.shape[0] >= specialise.SPECIALISE_FROM
        with single_thread_blas():
            ts = term_signals
            if self.blocks is None:
                self._fold_range(self.triangles, q, dq, ddq, tau, keep, progress, 0, ts)
            else:
                N = q.shape[0]
                if ranges is None:
                    L = block if block is not None else (self.block or block_length([N]))
                    ranges = block_ranges(N, L)
                else:
                    ranges = _check_ranges(ranges, N, where)
                step = float(dt) if dt else float("nan")
                for a, b in ranges:
                    tri = [np.zeros_like(T) for T in self.triangles]
                    kb = None if keep is None else keep[a:b]
                    self._fold_range(tri, q[a:b], dq[a:b], ddq[a:b], tau[a:b], kb, progress, a, None if ts is None else ts[a:b])
                    rows = np.full(self.robot.n, b - a, dtype=np.int64) if kb is None else kb.sum(axis=0)
                    self.triangles = [merge_triangles(T, B) for T, B in zip(self.triangles, tri)]
                    self.blocks.append(tri, rows, (b - a) * step)
        # the packing buffer (megabytes) lives for one add only: where many compressors are kept
        # (the term choice keeps one per candidate and fold) they would otherwise add up
        self._buf = None
        self.samples += q.shape[0]
        self.rows += q.shape[0] if keep is None else keep.sum(axis=0)
        self.sources.append(source)
        # no (N, n) temporaries: the fit's memory must not grow with the log
        self.sum_tau2 += np.einsum("ij,ij->j", tau, tau) if keep is None else np.einsum("ij,ij,ij->j", tau, tau, keep)
        return self

    def _check_signals(self, sig, shape, where: str) -> np.ndarray:
        k = len(self.terms)
        try:
            sig = np.asarray(sig, dtype=float)
        except (TypeError, ValueError):
            raise DataError(f"{where}: term_signals: expected numbers") from None
        if sig.shape != shape + (k,):
            raise DataError(f"{where}: term_signals has shape {sig.shape}, expected {shape + (k,)} (samples, joints, terms {','.join(self.terms) or 'none'})")
        if not np.all(np.isfinite(sig)):
            s, j, t = np.argwhere(~np.isfinite(sig))[0]
            raise DataError(f"{where}: term_signals: non-finite value at sample {s}, joint {self.robot.joint_names[j]}, term {self.terms[t]}")
        return np.ascontiguousarray(sig)

    # -- the fused pass ------------------------------------------------------------------------
    def _layout(self):
        """Kernel arrays: where each packed column comes from, columns per joint, packing buffer."""
        if getattr(self, "_packing", None) is None:
            n, nt = self.robot.n, len(self.terms)
            ncol = np.array([c.size for c in self.columns], dtype=np.int64)
            width = max(int(ncol.max()), 1)
            indep = self.base.independent
            kept = np.zeros((n, 10), dtype=np.int64)  # 1 where a body column is in the base set
            for f in indep[indep < 10 * n]:
                kept[f // 10, f % 10] = 1
            tsrc = np.zeros((n, width), dtype=np.int64)
            nrigid = np.zeros(n, dtype=np.int64)
            for j, cols in enumerate(self.columns):
                full = indep[cols]
                nrigid[j] = np.count_nonzero(full < 10 * n)
                # the kernel writes body columns in natural order, then the joint's terms
                expect = np.array([f for k in range(n) if self.robot.ancestors[k, j] for f in 10 * k + np.flatnonzero(kept[k])], dtype=np.int64)
                if not np.array_equal(full[: nrigid[j]], expect):  # pragma: no cover - the base set is in natural order
                    raise IdentError("base columns are not in natural order (body by body, then joint terms)")
                tsrc[j, nrigid[j] : cols.size] = (full[nrigid[j] :] - 10 * n) % max(nt, 1)
            kargs = (*kernel_arrays(self.robot), np.ascontiguousarray(self.robot.ancestors), np.ascontiguousarray(-self.robot.gravity, dtype=float))
            self._packing = (kept, nrigid, tsrc, ncol, kargs)
        return self._packing

    def _pack(self, q, dq, ddq, tau, keep, sig, start: int, stop: int, center) -> list[np.ndarray]:
        """Packed rows of samples start..stop-1: per joint a C-ordered (m_j, c_j + 1) block."""
        kept, nrigid, tsrc, ncol, kargs = self._layout()
        n, m = self.robot.n, stop - start
        buf = getattr(self, "_buf", None)
        if buf is None or buf.size < m * int((ncol + 1).sum()):  # the kernel writes without bounds checks
            buf = self._buf = np.empty(max(m, self.chunk) * int((ncol + 1).sum()))
        if keep is None:
            if getattr(self, "_all_kept", None) is None or self._all_kept.shape[0] < m:
                self._all_kept = np.ones((self.chunk, n), dtype=bool)
            kc = self._all_kept[:m]
        else:
            kc = keep[start:stop]
        sc = term_columns(self.terms, dq[start:stop], ddq[start:stop]) if sig is None else sig[start:stop]
        cm = self._center_matrix(center)
        counts, offs = np.empty(n, dtype=np.int64), np.empty(n, dtype=np.int64)
        args = (q[start:stop], dq[start:stop], ddq[start:stop], tau[start:stop], sc, kc, cm, center is not None)
        mod = self.specialised_kernel() if getattr(self, "_want_special", False) else None
        if mod is not None and all(a.flags.c_contiguous for a in args[:7]):
            specialise.pack_rows(mod, *args, tsrc, ncol, buf, counts, offs)
        else:
            pack_chunk(*args, *kargs, kept, nrigid, tsrc, ncol, buf, counts, offs)
        return [buf[offs[j] : offs[j] + counts[j] * (ncol[j] + 1)].reshape(counts[j], ncol[j] + 1) for j in range(n)]

    def specialised_kernel(self, wait: bool = False):
        """This arm's own packing kernel (:mod:`ident.arm.specialise`): the compiled module, or None
        while it compiles (``wait=True`` waits), when compiling failed, or when the arm is too large
        for one. Logs of :data:`ident.arm.specialise.SPECIALISE_FROM` samples or more ask for it
        themselves; asking earlier (say before a batch of long logs) only starts the compilation
        sooner. The rows it packs are bit for bit the general kernel's."""
        mod = getattr(self, "_special_mod", None)
        if mod is not None:  # asked once a chunk: no hashing of the source once it is ready
            return mod
        text = getattr(self, "_special_text", None)
        if text is None:
            kept, nrigid, _, ncol, kargs = self._layout()
            text = specialise.source(*kargs, kept, nrigid, ncol)
            self._special_text = text = text if text.count("\n") <= specialise.MAX_LINES else ""
        self._special_mod = mod = specialise.kernel(text, wait=wait) if text else None
        return mod

    def _center_matrix(self, center) -> np.ndarray:
        """The centre per joint in regressor-column positions (n, 10 n + k), zero outside the base set."""
        if getattr(self, "_cm_for", False) is not center:
            _, nrigid, tsrc, _, _ = self._layout()
            n = self.robot.n
            nb = 10 * n
            cm = np.zeros((n, nb + len(self.terms)))
            if center is not None:
                for j, cols in enumerate(self.columns):
                    full = self.base.independent[cols]
                    rigid = full < nb
                    cm[j, full[rigid]] = center[cols[rigid]]
                    cm[j, nb + tsrc[j, nrigid[j] : cols.size]] = center[cols[~rigid]]
            self._cm_for, self._cm = center, cm
        return self._cm

    def _fold_range(self, tri: list[np.ndarray], q, dq, ddq, tau, keep, progress, offset: int, term_signals=None) -> None:
        """Fold the samples of one stretch into the per-joint triangles `tri` (in place): the fused
        pass, chunk by chunk, by Householder QR or the centred Gram route (module notes)."""
        N = q.shape[0]
        sig = term_signals
        rows = self._rows_now
        center = self._center(rows, tri) if self.fold == "auto" else None
        gram_from = 0
        grams = partial = None
        qr_chunks, next_check, group = 0, 1, 0
        for start in range(0, N, self.chunk):
            stop = min(N, start + self.chunk)
            blocks = self._pack(q, dq, ddq, tau, keep, sig, start, stop, center)
            rows += [A.shape[0] for A in blocks]
            if center is None:
                self._fold_householder(tri, blocks)
                self.folded["householder"] += stop - start
                qr_chunks += 1
                if self.fold == "auto" and stop < N and qr_chunks >= next_check:
                    # checks at 1, 2, 3, 4, 6, 8, 12, ... chunks: cheap against the QR folds
                    next_check = max(qr_chunks + 1, int(1.5 * qr_chunks))
                    center = self._center(rows, tri)
                    gram_from = stop
            else:
                if grams is None:
                    grams = [np.zeros((c.size + 1, c.size + 1)) for c in self.columns]
                    partial = [np.zeros_like(G) for G in grams]
                for j, A in enumerate(blocks):
                    if A.shape[0]:
                        partial[j] += A.T @ A  # numpy sends A^T A to BLAS syrk
                group += 1
                if group == 16:  # two-level sums: rounding grows with 16 + chunks/16 terms, not chunks
                    for j in range(len(grams)):
                        grams[j] += partial[j]
                        partial[j][:] = 0.0
                    group = 0
                self.folded["gram"] += stop - start
            if progress is not None:
                progress(offset + stop)
        if grams is None:
            return
        for j in range(len(grams)):
            grams[j] += partial[j]
        saved = [T.copy() for T in tri]
        self._merge_grams(tri, grams, center)
        if not self._gram_accurate(tri, grams, center, rows):
            tri[:] = saved
            self.folded["gram"] -= N - gram_from
            self.folded["refolded"] += N - gram_from
            for start in range(gram_from, N, self.chunk):
                self._fold_householder(tri, self._pack(q, dq, ddq, tau, keep, sig, start, min(N, start + self.chunk), None))

    def _fold_householder(self, tri, blocks) -> None:
        for j, A in enumerate(blocks):
            if A.shape[0]:
                tri[j] = fold_rows(tri[j], A[:, :-1], A[:, -1])

    def _sets(self, tri) -> list[list[np.ndarray]]:
        """The triangle sets that together stand for the data folded so far."""
        if tri is self.triangles or not any(T.any() for T in self.triangles):
            return [tri]
        if not any(T.any() for T in tri):  # a block not yet folded adds nothing
            return [self.triangles]
        return [self.triangles, tri]

    def merge(self, other: "Compressor", join: bool = False) -> "Compressor":
        """Fold another compressor's triangles (same robot, terms and base set) into this one.

        Its time blocks are appended after this one's (both must keep blocks, or the result keeps
        none); `join`: its first block continues this one's last (see
        :meth:`ident.estimation.blocks.BlockStore.extend`).
        """
        if other.base.names != self.base.names or other.robot.joint_names != self.robot.joint_names:
            raise IdentError("cannot merge compressed data of different models or base sets")
        for j in range(self.robot.n):
            self.triangles[j] = merge_triangles(self.triangles[j], other.triangles[j])
        if self.blocks is not None and other.blocks is not None:
            self.blocks.extend(other.blocks, join)
        else:
            self.blocks = None
        self.samples += other.samples
        self.rows += other.rows
        self.sources += other.sources
        self.sum_tau2 += other.sum_tau2
        for k, v in other.folded.items():
            self.folded[k] = self.folded.get(k, 0) + v
        return self

    def joint_rows(self, j: int, weight: float = 1.0, T: np.ndarray | None = None) -> np.ndarray:
        """Joint j's triangle (or `T`, one over the same columns) embedded in the full base
        columns: (c_j + 1, b + 1), times `weight`."""
        b = self.n_base
        T = self.triangles[j] if T is None else T
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
        return residual_sums(self.triangles, self.columns, np.asarray(beta, dtype=float))


def _check_ranges(ranges, N: int, where: str) -> list[tuple[int, int]]:
    out = [(int(a), int(b)) for a, b in ranges]
    if not out or out[0][0] != 0 or out[-1][1] != N or any(b <= a for a, b in out) or any(p[1] != r[0] for p, r in zip(out[:-1], out[1:])):
        raise IdentError(f"{where}: block ranges must tile the {N} samples in order, got {out[:3]}{'...' if len(out) > 3 else ''}")
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
    total = sum(segment_rows(s) for s in segs)
    dt, cutoff = data_timing(data)
    if block is None:
        block = block_length([segment_rows(s) for s in segs], dt, cutoff)
    elif block < 1:
        raise IdentError(f"block: must be a positive number of samples, got {block}")
    comp.block = int(block)
    done = 0
    for seg in segs:
        cb = None if progress is None else (lambda k, d0=done: progress(d0 + k, total))
        if stored_segment(seg):
            # a segment kept on disk: read and fold one time block at a time, the same blocks
            # (and so the same triangles) as the whole segment in memory gives
            N = seg.n_samples
            ranges = block_ranges(N, comp.block) if comp.blocks is not None else [(a, min(N, a + STREAM_ROWS)) for a in range(0, N, STREAM_ROWS)]
            for i, (a, b) in enumerate(ranges):
                add_segment(comp, seg.read(a, b), drop_slow, slow_velocity, dt=dt, block=b - a, source=seg.source,
                            progress=None if cb is None else (lambda k, a0=a, f=cb: f(a0 + k)))
                if i:
                    comp.sources.pop()  # one log, one source entry
        else:
            add_segment(comp, seg, drop_slow, slow_velocity, progress=cb, dt=dt)
        done += segment_rows(seg)
    return comp


#: Samples read at a time from a segment kept on disk when no time blocks are kept.
STREAM_ROWS = 1 << 16


def add_segment(comp: Compressor, seg: SegmentData, drop_slow: bool, slow_velocity: float | None = None, start: int = 0,
                stop: int | None = None, ranges=None, progress=None, dt: float | None = None, block: int | None = None,
                source: str | None = None) -> Compressor:
    """Fold samples ``start:stop`` of one segment into `comp` as :func:`compress` does: slow
    samples out of the dry-friction rows (with `drop_slow`), stuck samples out of every row, the
    segment's filtered dry-friction signals in place of the computed ones.

    seg : a :class:`SegmentData` (from :func:`iter_segments` with ``with_slow=True``), or the rows
        read from a stored segment (then `source` names it).
    ranges : the time blocks of this stretch, [start, stop) relative to `start` (default: the
        compressor's block length over the stretch, or `block`). Folding a segment stretch by
        stretch with its blocks' ranges gives the blocks of one call (up to the Gram route's rounding).
    """
    stop = seg.q.shape[0] if stop is None else int(stop)
    sl = slice(int(start), stop)
    slow = seg.slow
    if slow is None and slow_velocity:
        slow = np.abs(np.asarray(seg.dq, dtype=float)) < slow_velocity
    keep = ~np.asarray(slow[sl], dtype=bool) if (drop_slow and slow is not None) else None
    if seg.stuck is not None:  # a stuck joint's friction is anything up to breakaway: no equation
        keep = ~seg.stuck[sl] if keep is None else keep & ~seg.stuck[sl]
    signals = None if seg.dry is None else term_columns(comp.terms, seg.dq[sl], seg.ddq[sl], seg.dry[sl])
    return comp.add(seg.q[sl], seg.dq[sl], seg.ddq[sl], seg.tau[sl], source=seg.source if source is None else source,
                    progress=progress, keep=keep, term_signals=signals, dt=dt, ranges=ranges, block=block)
