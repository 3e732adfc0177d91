"""Choosing the joint-friction model from the data: held-out prediction across blocks of the logs.

Candidates (:data:`CANDIDATES`) range from the textbook viscous + Coulomb + armature to
direction-dependent Coulomb levels and the low-speed friction shape. Each is judged by K-fold
cross-validation over contiguous time blocks (:data:`FOLDS` per segment, so every fold spans the
whole motion): fitted by OLS on the other folds, it predicts the held-out fold's torque, and the
score is the held-out residual sum of squares summed over joints, each joint's in units of its
noise variance (from the textbook candidate's fit). Every candidate is trained and scored on the
same equations (all but stuck samples), so the scores compare. A richer candidate wins only when it
lowers the score by more than :data:`MIN_GAIN`; otherwise the simpler one is kept.

Cost: one compression of a subsample (at most :data:`MAX_ROWS` samples, every k-th) per candidate.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..arm.base import base_parameters
from ..arm.dynamics import term_columns
from ..arm.model import Robot, parse_terms
from ..blas import single_thread_blas
from ..errors import DataError, NumericalError
from .compress import Compressor, iter_segments, segment_rows, stored_segment
from .least_squares import solve_reduced

#: The friction models tried, simplest first.
CANDIDATES = (("fv", "fc", "ia"), ("fv", "fc", "ia", "fcp", "fcn"), ("fv", "fc", "ia", "fl1", "fl2", "fl3"),
              ("fv", "fc", "ia", "fcp", "fcn", "fl1", "fl2", "fl3"))

#: Contiguous blocks per segment for the cross-validation.
FOLDS = 5

#: A richer model must lower the held-out score by more than this fraction.
MIN_GAIN = 0.01

#: Samples used for the choice, at most (evenly strided).
MAX_ROWS = 60_000


@dataclass
class TermChoice:
    """The chosen terms and the held-out score of every candidate (lower is better; chi-square units)."""

    terms: tuple[str, ...]
    scores: dict
    folds: int
    rows: int

    def describe(self) -> str:
        parts = ", ".join(f"{','.join(t)} {s:.6g}" for t, s in self.scores.items())
        return f"friction terms chosen by {self.folds}-fold held-out prediction on {self.rows} samples: {','.join(self.terms)} (scores: {parts})"


def choose_terms(robot: Robot, data, candidates=CANDIDATES, folds: int = FOLDS, max_rows: int = MAX_ROWS) -> TermChoice:
    """Pick the joint-term set that best predicts held-out blocks of `data` (see the module docstring).

    `data` as for :func:`ident.fit`. Returns a :class:`TermChoice`.
    """
    cands = [parse_terms(c) for c in candidates]
    if not cands:
        raise DataError("term choice: no candidate term sets")
    segs = list(iter_segments(robot, data, with_slow=True))
    total = sum(segment_rows(s) for s in segs)
    if total == 0:
        raise DataError("term choice: no samples")
    stride = choice_stride(total, max_rows)
    return choose_from_parts(robot, choice_parts(robot, segs, stride, cands, folds), total, stride)


def choice_stride(total: int, max_rows: int = MAX_ROWS) -> int:
    """Every how many samples the term choice uses, for `total` samples in all."""
    return max(1, int(np.ceil(total / max_rows)))


def choice_parts(robot: Robot, segs, stride: int, candidates=CANDIDATES, folds: int = FOLDS, into: dict | None = None,
                 spans=None) -> dict:
    """The held-out folds of some segments for every candidate: {terms: [Compressor] * folds}.

    segs : :class:`ident.estimation.compress.SegmentData` records; stride : from
    :func:`choice_stride` over ALL the data the choice is for. into : parts of the segments
    before these, to continue (then `candidates` and `folds` are theirs): folding all segments
    this way, part after part, gives bit for bit the folds of :func:`choose_terms`. Parts of
    different segments folded apart (e.g. on different machines) combine with :func:`merge_parts`
    (equal up to rounding). spans : per segment None, or ``(offset, total)`` when the segment is
    rows ``offset..`` of a segment of `total` samples cut into parts (each part then gets its
    share of that segment's strided samples and folds; the parts' folds merged in order give the
    whole segment's).
    """
    if into is not None:
        folds = len(next(iter(into.values())))
    # the strided samples of each segment, read once (a segment on disk is read by rows)
    subs = []
    for seg, span in zip(segs, spans or [None] * len(segs)):
        m = segment_rows(seg)
        off, total = span or (0, m)
        whole = np.arange(0, total, stride)
        if whole.size < folds:
            continue
        lo, hi = np.searchsorted(whole, [off, off + m])
        idx = whole[lo:hi] - off
        # fold f of the whole segment's strided samples, as far as this part holds it
        cuts = [(max(lo, f[0]) - lo, min(hi, f[-1] + 1) - lo) for f in np.array_split(np.arange(whole.size), folds)]
        if stored_segment(seg):
            part = seg.take(idx)
            subs.append((seg.source, part.q, part.dq, part.ddq, part.tau, part.stuck, part.dry, cuts))
        else:
            subs.append((seg.source, seg.q[idx], seg.dq[idx], seg.ddq[idx], seg.tau[idx],
                         None if seg.stuck is None else seg.stuck[idx], None if seg.dry is None else seg.dry[idx], cuts))
    out = {}
    with single_thread_blas():
        for terms in (list(into) if into is not None else [parse_terms(c) for c in candidates]):
            if into is not None:
                comps = into[terms]
            else:
                comps = [Compressor(robot, terms, base_parameters(robot, terms), keep_blocks=False) for _ in range(folds)]
            for source, q, dq, ddq, tau, stuck, dry, cuts in subs:
                keep = None if stuck is None else ~stuck
                for f, (a, b) in enumerate(cuts):
                    if b <= a:
                        continue
                    sl = slice(a, b)
                    # the term columns of one fold at a time (elementwise: the same values), so the
                    # richest candidate's (N, n, 8) block never exists for the whole choice
                    cols = None if dry is None else term_columns(terms, dq[sl], ddq[sl], dry[sl])
                    comps[f].add(q[sl], dq[sl], ddq[sl], tau[sl], source=source,
                                 keep=None if keep is None else keep[sl], term_signals=cols)
            out[terms] = comps
    return out


def merge_parts(parts: dict, more: dict) -> dict:
    """Fold the parts `more` (same candidates and folds) into `parts`, in place; returns `parts`."""
    for terms, comps in more.items():
        for a, b in zip(parts[terms], comps):
            a.merge(b)
    return parts


def choose_from_parts(robot: Robot, parts: dict, total: int, stride: int) -> TermChoice:
    """The choice of :func:`choose_terms` from its parts (:func:`choice_parts`, merged over all the data)."""
    cands = list(parts)
    folds = len(parts[cands[0]])
    scores = {}
    sigma2 = None
    with single_thread_blas():
        for terms in cands:
            comps = parts[terms]
            bp = comps[0].base
            if any(c.samples == 0 for c in comps):
                raise DataError("term choice: too few samples for the held-out folds")
            rss = np.zeros(robot.n)
            for f in range(folds):
                train = Compressor(robot, terms, bp, keep_blocks=False)
                for g in range(folds):
                    if g != f:
                        train.merge(comps[g])
                try:
                    beta = solve_reduced(train.reduce(), bp.names).beta
                except NumericalError:
                    rss += np.inf  # a model the training folds cannot determine predicts nothing
                    break
                rss += comps[f].joint_rss(beta)
            if sigma2 is None:
                rows = sum(c.rows for c in comps)
                sigma2 = np.maximum(rss / np.maximum(rows, 1), 1e-300)
            scores[terms] = float(np.sum(rss / sigma2))
    best = cands[0]
    for terms in cands[1:]:
        if scores[terms] < scores[best] * (1.0 - MIN_GAIN):
            best = terms
    return TermChoice(best, scores, folds, int(np.ceil(total / stride)))
