"""Identification samples: a segment of uniformly sampled data and the data set of segments.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import DataError

CHANNELS = ("q", "dq", "ddq", "tau")


#: Statistics taken over a whole segment or file -- the sample step (:func:`sample_step`), the
#: nominal step, the velocity noise, the RMS velocity and the acceleration at reversals that set
#: the slow zone, the data-chosen cutoff -- use at most its first this many samples (about 8.7
#: minutes at 1 kHz). Shorter logs see no difference; a long log is then conditioned block by
#: block with a bounded look-ahead and gives the same samples as conditioning it whole
#: (:mod:`ident.data.streaming`).
STAT_SAMPLES = 2**19


def sample_step(t: np.ndarray) -> float:
    """Sample step (s) of timestamps t (m,): the median of the first :data:`STAT_SAMPLES` steps."""
    return float(np.median(np.diff(t[: STAT_SAMPLES + 1]))) if t.shape[0] > 1 else float("nan")


@dataclass
class Segment:
    """One stretch of uniformly sampled, gap-free data from one file.

    Arrays are samples first, SI units, joints in the data set's order: ``t`` (m,) s; ``q``, ``dq``,
    ``ddq``, ``tau`` (m, n). Before conditioning ``dq``/``ddq`` may be None (not logged).
    ``slow`` (m, n) bool flags samples whose |dq| is within the velocity noise of zero, where
    sign(dq) of the Coulomb term is unreliable (the fit drops them from the dry-friction joints'
    equations); ``stuck`` (m, n) bool flags stretches where a joint stands still (its friction is
    anything up to breakaway, so its equations leave the fit); ``dry`` (m, n, 4) holds the
    dry-friction signals [sign(v), tanh(v / s_1..3)] of a lightly filtered velocity after the same
    low-pass as the torque (see :func:`ident.arm.dynamics.term_columns`).
    """

    source: str
    t: np.ndarray
    q: np.ndarray
    dq: np.ndarray | None
    ddq: np.ndarray | None
    tau: np.ndarray
    slow: np.ndarray | None = None
    stuck: np.ndarray | None = None
    dry: np.ndarray | None = None

    @property
    def n_samples(self) -> int:
        return int(self.t.shape[0])

    @property
    def dt(self) -> float:
        """Sample step (s): :func:`sample_step` of ``t``."""
        return sample_step(self.t)

    @property
    def duration(self) -> float:
        return float(self.t[-1] - self.t[0]) if self.t.shape[0] else 0.0


@dataclass
class Dataset:
    """Identification samples: joint names, segments, and what happened on the way in.

    Stacked properties ``t``, ``q``, ``dq``, ``ddq``, ``tau`` (N, n) concatenate the segments (a
    new array each call). ``noise_var`` (n,) is the per-joint torque noise variance of one sample
    (N^2 m^2) when period averaging estimated it, else None. ``info`` holds counts and settings
    (see :func:`describe`); ``warnings`` is a list of one-line messages.
    """

    joint_names: list[str]
    segments: list[Segment]
    warnings: list[str] = field(default_factory=list)
    noise_var: np.ndarray | None = None
    info: dict = field(default_factory=dict)

    @property
    def n(self) -> int:
        return len(self.joint_names)

    @property
    def n_samples(self) -> int:
        return int(sum(s.n_samples for s in self.segments))

    def _stack(self, name: str):
        parts = [getattr(s, name) for s in self.segments]
        if not parts:
            return np.zeros((0,) if name == "t" else (0, self.n))
        if any(p is None for p in parts):
            return None
        return np.concatenate(parts, axis=0)

    @property
    def t(self):
        return self._stack("t")

    @property
    def q(self):
        return self._stack("q")

    @property
    def dq(self):
        return self._stack("dq")

    @property
    def ddq(self):
        return self._stack("ddq")

    @property
    def tau(self):
        return self._stack("tau")

    @property
    def slow(self):
        return self._stack("slow")

    @property
    def stuck(self):
        return self._stack("stuck")

    @property
    def dry(self):
        parts = [s.dry for s in self.segments]
        if not parts or any(p is None for p in parts):
            return None
        return np.concatenate(parts, axis=0)

    def segment_slices(self) -> list[slice]:
        """Row slices of each segment in the stacked arrays."""
        out, k = [], 0
        for s in self.segments:
            out.append(slice(k, k + s.n_samples))
            k += s.n_samples
        return out

    def split(self, stacked: np.ndarray) -> list[np.ndarray]:
        """Cut a stacked (N, ...) array (e.g. a predicted torque) into per-segment pieces."""
        stacked = np.asarray(stacked)
        if stacked.shape[0] != self.n_samples:
            raise DataError(f"expected {self.n_samples} rows (one per sample), got {stacked.shape[0]}")
        return [stacked[s] for s in self.segment_slices()]
