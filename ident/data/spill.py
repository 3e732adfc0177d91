"""Arrays on disk, appended block by block and read back by row ranges: the store behind long logs.

A long log is conditioned block by block (:mod:`ident.data.streaming`); its raw SI channels and its
conditioned samples go to files in a temporary folder, so memory holds one block at a time, and
the fit reads them back in time blocks. The folder goes when the last segment that uses it goes.
"""

from __future__ import annotations

import shutil
import tempfile
import weakref
from pathlib import Path

import numpy as np

from .dataset import STAT_SAMPLES, Segment, sample_step

#: Rows read at a time when gathering strided rows from a stored segment.
READ_ROWS = 1 << 14


class Spill:
    """A temporary folder of row-appendable arrays; removed when this object is garbage-collected."""

    def __init__(self, parent: str | None = None):
        self.folder = Path(tempfile.mkdtemp(prefix="ident_spill_", dir=parent))
        self._final = weakref.finalize(self, shutil.rmtree, str(self.folder), True)
        self._count = 0

    def array(self, tail: tuple = (), dtype=float) -> RowFile:
        """A new empty array of rows shaped `tail` (e.g. (n,) for (rows, n))."""
        self._count += 1
        return RowFile(self, self.folder / f"a{self._count}.bin", tuple(int(x) for x in tail), np.dtype(dtype))

    def close(self) -> None:
        """Remove the folder now."""
        self._final()


class RowFile:
    """One on-disk array of shape (rows,) + tail, appended at the end, read by row ranges."""

    def __init__(self, spill: Spill, path: Path, tail: tuple, dtype: np.dtype):
        self.spill, self.path, self.tail, self.dtype = spill, path, tail, dtype
        self.rows = 0
        self._row_items = int(np.prod(tail)) if tail else 1
        self._fh = open(path, "wb")  # noqa: SIM115 - kept open for appends, closed by finish()

    def append(self, a: np.ndarray) -> int:
        """Append rows `a` (k,) + tail; returns the index of the first appended row."""
        a = np.ascontiguousarray(a, dtype=self.dtype)
        if a.shape[1:] != self.tail:
            raise ValueError(f"rows of shape {a.shape[1:]} appended to an array of rows {self.tail}")
        start = self.rows
        a.tofile(self._fh)
        self.rows += a.shape[0]
        return start

    def finish(self) -> None:
        """Flush and close the writer (reads see every row appended so far)."""
        if self._fh is not None and not self._fh.closed:
            self._fh.close()

    def remove(self) -> None:
        """Delete the file (the array is no longer needed)."""
        self.finish()
        self.path.unlink(missing_ok=True)
        self.rows = 0

    def read(self, a: int, b: int) -> np.ndarray:
        """Rows a..b-1 as a new array (b - a,) + tail."""
        if self._fh is not None and not self._fh.closed:
            self._fh.flush()
        a, b = int(a), int(b)
        k = max(0, b - a)
        out = np.fromfile(self.path, dtype=self.dtype, count=k * self._row_items, offset=a * self._row_items * self.dtype.itemsize)
        return out.reshape((k,) + self.tail)


class StoredSegment:
    """A conditioned segment whose arrays live in a :class:`Spill` (same fields as
    :class:`ident.data.dataset.Segment`). The array attributes read the whole segment from disk;
    :meth:`read` and :meth:`take` read only the rows asked for."""

    FIELDS = ("t", "q", "dq", "ddq", "tau", "slow", "stuck", "dry")

    def __init__(self, source: str, files: dict, start: int, n_samples: int):
        self.source = source
        self._files = files  # field -> RowFile (or None); holds the spill alive
        self._start = int(start)
        self._n = int(n_samples)
        t = self._read("t", 0, min(self._n, STAT_SAMPLES + 1))
        self._t0, self._t1 = (float(t[0]), float(self._read("t", self._n - 1, self._n)[0])) if self._n else (0.0, 0.0)
        self._dt = sample_step(t)  # as a Segment in memory reports it, without reading the whole t

    @property
    def n_samples(self) -> int:
        return self._n

    @property
    def dt(self) -> float:
        """Sample step (s): the median step of ``t``."""
        return self._dt

    @property
    def duration(self) -> float:
        return self._t1 - self._t0 if self._n else 0.0

    def _read(self, name: str, a: int, b: int):
        f = self._files.get(name)
        return None if f is None else f.read(self._start + a, self._start + b)

    def read(self, a: int, b: int) -> Segment:
        """Rows a..b-1 of the segment as an in-memory :class:`Segment`."""
        a, b = max(0, int(a)), min(self._n, int(b))
        return Segment(self.source, *(self._read(k, a, b) for k in self.FIELDS))

    def take(self, rows: np.ndarray) -> Segment:
        """The rows `rows` (sorted indices into the segment) as an in-memory :class:`Segment`, read
        :data:`READ_ROWS` at a time."""
        rows = np.asarray(rows, dtype=np.int64)
        parts = []
        for a in range(0, self._n, READ_ROWS):
            lo, hi = np.searchsorted(rows, [a, a + READ_ROWS])
            if hi > lo:
                blk = self.read(a, min(self._n, a + READ_ROWS))
                idx = rows[lo:hi] - a
                parts.append([None if getattr(blk, k) is None else getattr(blk, k)[idx] for k in self.FIELDS])
        if not parts:
            return self.read(0, 0)
        cols = [None if parts[0][i] is None else np.concatenate([p[i] for p in parts]) for i in range(len(self.FIELDS))]
        return Segment(self.source, *cols)

    def __getattr__(self, name):
        # whole-segment arrays for code that wants them (reads the segment from disk)
        if name in StoredSegment.FIELDS:
            return self._read(name, 0, self._n)
        raise AttributeError(name)


def stored(seg) -> bool:
    """True for a segment kept on disk (:class:`StoredSegment`)."""
    return isinstance(seg, StoredSegment)


def store_dataset(dataset, parent: str | None = None):
    """A copy of a data set whose segments live on disk (:class:`StoredSegment`), the form the
    block path gives a long log; the fit reads it back block by block. Same joints, info, warnings."""
    from .dataset import Dataset

    spill = Spill(parent)
    n = dataset.n
    files = {"t": spill.array(()), "q": spill.array((n,)), "dq": spill.array((n,)), "ddq": spill.array((n,)),
             "tau": spill.array((n,)), "slow": spill.array((n,), bool), "stuck": spill.array((n,), bool), "dry": spill.array((n, 4))}
    segs = []
    for s in dataset.segments:
        mine = {k: (f if getattr(s, k) is not None else None) for k, f in files.items()}
        start = files["t"].rows
        for k, f in mine.items():
            if f is not None:
                if f.rows != start:  # a field missing in an earlier segment: pad so rows stay aligned
                    f.append(np.zeros((start - f.rows,) + f.tail, dtype=f.dtype))
                f.append(getattr(s, k))
        segs.append(StoredSegment(s.source, mine, start, s.n_samples))
    return Dataset(list(dataset.joint_names), segs, list(dataset.warnings), dataset.noise_var, {**dataset.info, "stored": True})
