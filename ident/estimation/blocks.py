"""Contiguous time blocks of the compressed problem, kept for the block jackknife.

Filtering, decimation, closed-loop control and model error leave residuals that are correlated in
time, so the samples are not independent equations; contiguous stretches of data long enough to
hold that correlation are (nearly) independent of each other, and the spread of the estimate over
them is an honest uncertainty (:mod:`ident.estimation.uncertainty`). Each block is kept as its own
per-joint triangles of ``[Y_b | tau]`` (the same form as the totals in
:mod:`ident.estimation.compress`), so the jackknife needs no second pass over the data.

Block rule (:func:`block_length`): a block lasts at least :data:`CUTOFF_PERIODS` periods of the
low-pass cutoff (the filter correlates residuals over about one cutoff period, so the correlation
that leaks across a block edge is a few per cent of the block's), but blocks are shortened when
the data would otherwise give fewer than :data:`MIN_BLOCKS` of them (a jackknife over few blocks is
itself too uncertain). Blocks never span two segments (or two logs). Period-averaged data are one
period a segment: its blocks are slices of the averaged period. Memory stays bounded: when there
are more than :data:`MAX_BLOCKS` blocks, adjacent pairs are merged (which only lengthens blocks).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.linalg

#: Minimum block duration, in periods of the low-pass cutoff (common practice for a block
#: length: many correlation times; the filtered residual decorrelates within about one).
CUTOFF_PERIODS = 20.0

#: Fewest blocks the rule aims for: with K blocks the jackknife standard deviation has about
#: K - 1 degrees of freedom (a t distribution with 19 of them puts 94 % inside +-2).
MIN_BLOCKS = 20

#: Most blocks kept (memory cap); beyond it adjacent blocks are merged pairwise.
MAX_BLOCKS = 64


def block_length(segment_samples, dt=None, cutoff: float | None = None, min_blocks: int | None = None) -> int:
    """Samples per block for data made of segments of `segment_samples` (list of ints).

    dt : sample step (s) of the segments (their median); cutoff : the low-pass cutoff (Hz) the
    data were conditioned with (None or 0: no filter, so only the count rule applies).
    Returns the block length in samples (>= 1): at least ``CUTOFF_PERIODS / cutoff`` seconds,
    shortened so the segments hold at least `min_blocks` (default :data:`MIN_BLOCKS`) blocks.
    """
    min_blocks = MIN_BLOCKS if min_blocks is None else int(min_blocks)
    sizes = [int(s) for s in segment_samples if int(s) > 0]
    total = sum(sizes)
    if total == 0:
        return 1
    short = max(1, total // max(1, min_blocks))
    if cutoff and dt and np.isfinite(dt) and dt > 0:
        target = int(math.ceil(CUTOFF_PERIODS / (cutoff * dt)))
    else:
        target = short
    L = max(1, min(target, short))
    # Segments split into whole blocks; a segment shorter than L is one block. When the
    # remainders are too many to reach min_blocks, shorten L until the count is met.
    while L > 1 and sum(max(1, s // L) for s in sizes) < min_blocks:
        L = max(1, int(L * 0.8))
    return L


def block_ranges(n_samples: int, length: int | None) -> list[tuple[int, int]]:
    """Contiguous [start, stop) ranges of about `length` samples covering ``range(n_samples)``
    (the remainder is shared out, so no block is shorter than `length`; None: one block)."""
    if n_samples <= 0:
        return []
    if not length or length >= n_samples:
        return [(0, n_samples)]
    k = max(1, n_samples // int(length))
    edges = np.linspace(0, n_samples, k + 1).round().astype(int)
    return [(int(a), int(b)) for a, b in zip(edges[:-1], edges[1:]) if b > a]


def merge_triangles(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Upper triangle (c, c) standing for the sum of the quadratic forms of triangles A and B (c, c)."""
    c = A.shape[1]
    T = scipy.linalg.qr(np.vstack([A, B]), mode="r", check_finite=False)[0][:c]
    if T.shape[0] < c:
        T = np.vstack([T, np.zeros((c - T.shape[0], c))])
    return np.triu(T)


class BlockStore:
    """Per-block, per-joint triangles in time order, with a cap on their number.

    blocks : list over blocks of lists over joints of (c_j + 1, c_j + 1) triangles;
    rows : list over blocks of (n,) int equation counts; seconds : list of block durations (s,
    NaN when unknown).
    """

    def __init__(self, max_blocks: int = MAX_BLOCKS):
        if max_blocks < 2:
            raise ValueError(f"max_blocks: need at least 2, got {max_blocks}")
        self.max_blocks = int(max_blocks)
        self.blocks: list[list[np.ndarray]] = []
        self.rows: list[np.ndarray] = []
        self.seconds: list[float] = []

    def __len__(self) -> int:
        return len(self.blocks)

    def append(self, triangles: list[np.ndarray], rows, seconds: float = float("nan")) -> None:
        """Add one block (its per-joint triangles) at the end, merging pairs beyond the cap."""
        self.blocks.append(list(triangles))
        self.rows.append(np.asarray(rows, dtype=np.int64).copy())
        self.seconds.append(float(seconds))
        if len(self.blocks) > self.max_blocks:
            self._halve()

    def extend(self, other: "BlockStore", join: bool = False) -> None:
        """Append another store's blocks (copies of the arrays) one at a time, applying the cap at
        each, so a store built from parts groups its blocks exactly as one built in a single pass.

        join : the other store's first block is the rest of this store's last block (a block cut
        where two parts of a segment meet): it is merged into it (its group, when the cap has
        merged that block already, which is where a single pass puts the whole block)."""
        items = list(zip(other.blocks, other.rows, other.seconds))
        if join and items and self.blocks:
            tri, r, s = items.pop(0)
            self.blocks[-1] = [merge_triangles(a, b) for a, b in zip(self.blocks[-1], tri)]
            self.rows[-1] = self.rows[-1] + np.asarray(r, dtype=np.int64)
            self.seconds[-1] = self.seconds[-1] + float(s)
        for tri, r, s in items:
            self.append([t.copy() for t in tri], r, s)

    def _halve(self) -> None:
        # Merging neighbours keeps blocks contiguous in time (within a log); an odd block out stays as it is.
        blocks, rows, secs = [], [], []
        for k in range(0, len(self.blocks) - 1, 2):
            blocks.append([merge_triangles(a, b) for a, b in zip(self.blocks[k], self.blocks[k + 1])])
            rows.append(self.rows[k] + self.rows[k + 1])
            secs.append(self.seconds[k] + self.seconds[k + 1])
        if len(self.blocks) % 2:
            blocks.append(self.blocks[-1])
            rows.append(self.rows[-1])
            secs.append(self.seconds[-1])
        self.blocks, self.rows, self.seconds = blocks, rows, secs
