"""The parameter regressor: tau = Y(q, q', q'') pi, linear in the body and joint parameters.

Columns (see :meth:`ident.arm.model.Robot.param_names`): 10 inertial columns per body
``<body>.m, .mx, .my, .mz, .xx, .xy, .xz, .yy, .yz, .zz`` (first moment in kg m, inertia about the
body-frame origin in kg m^2), then per joint the selected terms ``<joint>.fv`` (q'), ``.fc``
(sign q'), ``.fo`` (1) and ``.ia`` (q'').

The regressor of a long log never has to exist whole: :func:`iter_regressor` hands out chunks of a
bounded, reused buffer, and estimation compresses them as they come.
"""

from __future__ import annotations

from typing import Callable, Iterator

import numpy as np

from ..errors import IdentError
from . import kernels
from .model import JOINT_TERMS, Robot, kernel_arrays, parse_terms

#: Samples per chunk: a 7-joint, 98-column chunk of 2048 samples is about 11 MB.
CHUNK = 2048


def _term_codes(terms) -> np.ndarray:
    codes = list(JOINT_TERMS)
    return np.array([codes.index(c) for c in parse_terms(terms)], dtype=np.int64)


def regressor_into(robot: Robot, q, dq, ddq, out: np.ndarray, terms=()) -> np.ndarray:
    """Fill `out` (N, n, p) with Y(q, q', q'') for (N, n) states; no allocation beyond kernel scratch."""
    codes = _term_codes(terms)
    p = robot.n * (10 + codes.size)
    if out.shape != (q.shape[0], robot.n, p) or out.dtype != np.float64 or not out.flags.c_contiguous:
        raise IdentError(f"regressor buffer: expected C-contiguous float64 of shape {(q.shape[0], robot.n, p)}, got {out.dtype} {out.shape}")
    args = kernel_arrays(robot)
    kernels.regressor_chunk(q, dq, ddq, *args, robot.ancestors, -robot.gravity, codes, out)
    return out


def regressor(robot: Robot, q, dq, ddq, terms=(), term_signals=None) -> np.ndarray:
    """The full regressor Y (N, n, p) for states q, q', q'' (N, n); p = n (10 + len(terms)).

    `term_signals` (N, n, k) optionally replaces the k joint-term columns (see
    :func:`set_term_columns`). Allocates N n p doubles: for long logs use :func:`iter_regressor`.
    """
    q, dq, ddq = robot.check_states(q, dq, ddq)
    out = np.empty((q.shape[0], robot.n, robot.n_params(terms)))
    for start in range(0, q.shape[0], CHUNK):
        sl = slice(start, min(q.shape[0], start + CHUNK))
        regressor_into(robot, q[sl], dq[sl], ddq[sl], out[sl], terms)
    if term_signals is not None:
        set_term_columns(out, term_signals)
    return out


def set_term_columns(Y: np.ndarray, term_signals) -> np.ndarray:
    """Overwrite the joint-term columns of a regressor block Y (m, n, p) in place with
    `term_signals` (m, n, k), joint j's own k columns in its own row (the others stay zero).

    Used for parallel filtering: the dry-friction columns of a conditioned data set are filtered
    like the torque (:func:`ident.arm.dynamics.term_columns`) rather than evaluated on q'.
    """
    m, n, p = Y.shape
    S = np.asarray(term_signals, dtype=float)
    k = (p - 10 * n) // n
    if S.shape != (m, n, k):
        raise IdentError(f"joint-term signals: expected shape {(m, n, k)}, got {S.shape}")
    if k:
        cols = 10 * n + k * np.arange(n)[:, None] + np.arange(k)[None, :]
        Y[:, np.arange(n)[:, None], cols] = S
    return Y


def iter_regressor(robot: Robot, q, dq, ddq, terms=(), chunk: int = CHUNK) -> Iterator[tuple[slice, np.ndarray]]:
    """Yield ``(samples, Y_chunk)`` over the log: Y_chunk (m, n, p) for the samples in slice `samples`.

    The chunk is a view of one reused buffer (memory stays at chunk n p doubles whatever N is):
    consume or copy it before asking for the next.
    """
    q, dq, ddq = robot.check_states(q, dq, ddq)
    if chunk < 1:
        raise IdentError(f"chunk: must be a positive number of samples, got {chunk}")
    N = q.shape[0]
    buf = np.empty((min(chunk, max(N, 1)), robot.n, robot.n_params(terms)))
    for start in range(0, N, chunk):
        stop = min(N, start + chunk)
        Y = buf[: stop - start]
        regressor_into(robot, q[start:stop], dq[start:stop], ddq[start:stop], Y, terms)
        yield slice(start, stop), Y


def stream_regressor(robot: Robot, q, dq, ddq, consumer: Callable[[slice, np.ndarray], None], terms=(), chunk: int = CHUNK) -> None:
    """Call ``consumer(samples, Y_chunk)`` for each chunk of the log (see :func:`iter_regressor`)."""
    for sl, Y in iter_regressor(robot, q, dq, ddq, terms, chunk):
        consumer(sl, Y)


def predict(robot: Robot, q, dq, ddq, params, terms=()) -> np.ndarray:
    """Torque Y pi (N, n) for a full parameter vector `params` (p,), chunk by chunk."""
    params = np.asarray(params, dtype=float).reshape(-1)
    p = robot.n_params(terms)
    if params.size != p:
        raise IdentError(f"parameters: expected {p} values for {robot.name} with terms {parse_terms(terms)}, got {params.size}")
    q, dq, ddq = robot.check_states(q, dq, ddq)
    out = np.empty_like(q)
    for sl, Y in iter_regressor(robot, q, dq, ddq, terms):
        out[sl] = Y @ params
    return out
