"""Closed-loop simulation of an arm tracking a reference trajectory, for test and demo logs.

The plant is the arm with its TRUE parameters (rigid bodies, viscous and Coulomb friction, offset,
armature)::

    (M(q) + diag(ia)) q'' = tau - c(q, q') - g(q) - fv q' - fc s(q') - fo

integrated at a fine fixed step ``h`` (``substeps`` per control tick) by semi-implicit Euler with the
friction treated linearly-implicitly: ``(M + h D) q'_+ = M q' + h (tau - bias - F(q') + D q')``
with ``D = dF/dq'``. That keeps the step stable although the Coulomb law is very stiff near
``q' = 0`` (it is smoothed there as ``fc tanh(q'/eps)`` with a tiny ``eps``, so the plant and the
identified model's ``sign`` differ only while ``|q'| < a few eps``).

The controller runs at the trajectory's sample rate with a zero-order hold: rigid-body feedforward
from the *description's* model (the prior: a real controller knows only the CAD values; no friction
or rotor-inertia compensation) plus a PD term on the quantized encoder position and a filtered
finite-difference velocity, with gains scaled by the description's joint inertia at the start plus
the drive's rotor inertia (a datasheet value, taken equal to the plant's armature). The logged
torque is the commanded motor torque plus Gaussian noise (a current measurement); logged positions
are the quantized encoder readings. Everything is deterministic for a seed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numba import njit

from ..arm import kernels
from ..arm.dynamics import check_joint_params, inverse_dynamics, mass_matrix
from ..arm.model import PRISMATIC, Robot, kernel_arrays
from ..data.conditioning import derivative
from ..errors import DataError, IdentError, first_line
from ..fileio import atomic_path
from ..intake import MAGNITUDE, check_steps
from ..progress import Progress


@dataclass
class SimulationSettings:
    """Options of :func:`simulate` (SI units).

    Attributes
    ----------
    log_rate : log sample rate, Hz (None: the control rate). Must divide the control rate.
    substeps : plant integration steps per control tick (step h = 1 / (rate substeps)).
    torque_noise : std of the Gaussian noise on the logged torque, N m (or N): scalar or (n,).
    encoder_counts : encoder counts per revolution on revolute joints (quantization 2 pi / counts rad).
    linear_resolution : encoder resolution of prismatic joints, m.
    bandwidth : closed-loop bandwidth of the PD tracking term, Hz (gains scale with M_ii at the start).
    damping : damping ratio of the PD term.
    velocity_cutoff : cut-off of the first-order filter on the controller's velocity estimate, Hz.
    coulomb_eps : velocity scale of the smoothed Coulomb law in the plant, rad/s (or m/s).
    log_velocity : also log the plant velocity as ``<joint>.dq`` (as a drive's velocity output).
    seed : seed of the noise generator.
    """

    log_rate: float | None = None
    substeps: int = 10
    torque_noise: float | np.ndarray = 0.0
    encoder_counts: int = 2**20
    linear_resolution: float = 1e-6
    bandwidth: float = 4.0
    damping: float = 0.9
    velocity_cutoff: float = 50.0
    coulomb_eps: float = 1e-3
    log_velocity: bool = False
    seed: int = 0


@dataclass
class SimulationResult:
    """A simulated log at the log rate: ``t`` (M,) s; ``q``, ``dq``, ``tau`` (M, n) SI.

    ``q`` are the quantized encoder positions, ``dq`` the plant velocities, ``tau`` the logged
    torque (command plus noise), ``tau_command`` the noise-free command, ``q_true`` the plant
    positions. ``tracking_rms`` (n,) is the RMS of reference minus plant position over the run.
    """

    joint_names: list[str]
    t: np.ndarray
    q: np.ndarray
    dq: np.ndarray
    tau: np.ndarray
    tau_command: np.ndarray
    q_true: np.ndarray
    tracking_rms: np.ndarray
    torque_noise: np.ndarray
    saturated: int
    settings: SimulationSettings = field(default_factory=SimulationSettings)

    def columns(self) -> dict[str, np.ndarray]:
        """Log columns in the default table convention: ``time``, ``<joint>.q``, [``<joint>.dq``], ``<joint>.tau``."""
        cols = {"time": self.t}
        for i, j in enumerate(self.joint_names):
            cols[f"{j}.q"] = self.q[:, i]
        if self.settings.log_velocity:
            for i, j in enumerate(self.joint_names):
                cols[f"{j}.dq"] = self.dq[:, i]
        for i, j in enumerate(self.joint_names):
            cols[f"{j}.tau"] = self.tau[:, i]
        return cols


def check_reference_range(robot: Robot, q: np.ndarray, where) -> None:
    """Refuse reference positions (N, n) far outside the joint limits: beyond a tenth of the range
    (at least 0.05 rad or m) past a finite limit, or beyond the sane magnitude of a position."""
    lo, hi = np.asarray(robot.lower, dtype=float), np.asarray(robot.upper, dtype=float)
    finite = np.isfinite(lo) & np.isfinite(hi)
    slack = np.where(finite, np.maximum(0.1 * np.where(finite, hi - lo, 0.0), 0.05), np.inf)
    bound = MAGNITUDE["position"][0]
    with np.errstate(invalid="ignore"):
        bad = (q < lo - slack) | (q > hi + slack) | (np.abs(q) > bound)
    if np.any(bad):
        row, j = (int(v) for v in np.argwhere(bad)[0])
        raise DataError(f"{where}: column '{robot.joint_names[j]}.q' at data row {row + 1} is {q[row, j]:g}, "
                        f"far outside the joint limits [{lo[j]:g}, {hi[j]:g}]")


def read_trajectory(path, robot: Robot) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Read a reference trajectory CSV: ``time`` (s) and per joint ``<joint>.q`` [``.dq``, ``.ddq``].

    Missing velocity or acceleration columns are obtained by differentiating (second-order
    central differences). Returns t (K,), q, dq, ddq (K, n) in the robot's joint order.
    """
    import pandas as pd

    p = Path(path)
    if not p.is_file():
        raise DataError(f"{p}: trajectory file not found")
    try:
        df = pd.read_csv(p)
    except Exception as exc:  # pandas raises many types on malformed text
        raise DataError(f"{p}: cannot read as CSV ({type(exc).__name__}: {first_line(exc)})") from None
    if "time" not in df.columns:
        raise DataError(f"{p}: column 'time' is missing")
    missing = [f"{j}.q" for j in robot.joint_names if f"{j}.q" not in df.columns]
    if missing:
        raise DataError(f"{p}: missing column(s) {', '.join(missing)} for the joints of {robot.name}")
    if len(df) < 3:
        raise DataError(f"{p}: needs at least 3 rows, has {len(df)}")

    def column(name):
        try:
            v = pd.to_numeric(df[name], errors="raise").to_numpy(dtype=float)
        except (ValueError, TypeError):
            bad = int(np.flatnonzero(pd.to_numeric(df[name], errors="coerce").isna())[0])
            raise DataError(f"{p}: column '{name}' has a non-numeric value at data row {bad + 1}") from None
        if not np.all(np.isfinite(v)):
            raise DataError(f"{p}: column '{name}' has an empty, NaN or infinite value at data row {int(np.flatnonzero(~np.isfinite(v))[0]) + 1}")
        return v

    t = column("time")
    dt = np.diff(t)
    if np.any(dt <= 0):
        raise DataError(f"{p}: column 'time' does not increase at data row {int(np.flatnonzero(dt <= 0)[0]) + 2}")
    if np.ptp(dt) > 1e-6 * np.mean(dt):
        raise DataError(f"{p}: column 'time': the trajectory must be sampled at a constant rate (the controller's)")
    q = np.column_stack([column(f"{j}.q") for j in robot.joint_names])
    has = lambda s: all(f"{j}.{s}" in df.columns for j in robot.joint_names)  # noqa: E731
    check_reference_range(robot, q, p)
    dt_mean = float(np.mean(dt))  # the grid is uniform (checked above)
    dq = np.column_stack([column(f"{j}.dq") for j in robot.joint_names]) if has("dq") else derivative(q, dt_mean)
    ddq = np.column_stack([column(f"{j}.ddq") for j in robot.joint_names]) if has("ddq") else derivative(dq, dt_mean)
    return t, q, dq, ddq



#: Plant integration steps per compiled call, at most (about 0.1 s of work on a 7-joint arm).
CHUNK_STEPS = 200_000


@njit(cache=True, nogil=True)
def _control_loop(k0, k1, q_ref, dq_ref, tau_ff, state, parent, jtype, Rf, pf, ax, a0, params, fv, fc, fo, ia,
                  eps, kp, kd, res, alpha, tau_max, T, substeps, log_every, q_log, dq_log, qt_log, tau_log, err2):
    """Run control ticks k0..k1-1. `state` (4, n): plant q, plant q', previous encoder reading, velocity estimate.

    Writes log rows for ticks that are multiples of `log_every`; accumulates squared tracking
    error in `err2` (n,). Returns the number of saturated command samples.
    """
    n = q_ref.shape[1]
    h = T / substeps
    q = np.empty((1, n))
    dq = np.empty((1, n))
    zero = np.zeros((1, n))
    bias = np.empty((1, n))
    M = np.empty((1, n, n))
    rhs = np.empty(n)
    tau = np.empty(n)
    sat = 0
    for i in range(n):
        q[0, i] = state[0, i]
        dq[0, i] = state[1, i]
    for k in range(k0, k1):
        for i in range(n):
            enc = np.round(q[0, i] / res[i]) * res[i]
            raw = (enc - state[2, i]) / T
            state[3, i] = alpha * state[3, i] + (1.0 - alpha) * raw
            state[2, i] = enc
            u = tau_ff[k, i] + kp[i] * (q_ref[k, i] - enc) + kd[i] * (dq_ref[k, i] - state[3, i])
            if u > tau_max[i]:
                u = tau_max[i]
                sat += 1
            elif u < -tau_max[i]:
                u = -tau_max[i]
                sat += 1
            tau[i] = u
            e = q_ref[k, i] - q[0, i]
            err2[i] += e * e
        if k % log_every == 0:
            r = k // log_every
            for i in range(n):
                q_log[r, i] = state[2, i]
                dq_log[r, i] = dq[0, i]
                qt_log[r, i] = q[0, i]
                tau_log[r, i] = tau[i]
        for _ in range(substeps):
            kernels.rnea_chunk(q, dq, zero, parent, jtype, Rf, pf, ax, a0, params, bias)
            kernels.crba_chunk(q, parent, jtype, Rf, pf, ax, params, M)
            A = M[0].copy()
            for i in range(n):
                A[i, i] += ia[i]
                th = np.tanh(dq[0, i] / eps)
                friction = fv[i] * dq[0, i] + fc[i] * th + fo[i]
                d = fv[i] + fc[i] * (1.0 - th * th) / eps
                rhs[i] = h * (tau[i] - bias[0, i] - friction + d * dq[0, i])
            for i in range(n):
                s = 0.0
                for j in range(n):
                    s += A[i, j] * dq[0, j]
                rhs[i] += s
            for i in range(n):
                A[i, i] += h * (fv[i] + fc[i] * (1.0 - np.tanh(dq[0, i] / eps) ** 2) / eps)
            v = np.linalg.solve(A, rhs)
            for i in range(n):
                dq[0, i] = v[i]
                q[0, i] += h * v[i]
    for i in range(n):
        state[0, i] = q[0, i]
        state[1, i] = dq[0, i]
    return sat


def simulate(robot: Robot, t, q_ref, dq_ref, ddq_ref, inertial, joint_params=None,
             settings: SimulationSettings | None = None, progress: bool = False) -> SimulationResult:
    """Simulate the arm tracking a reference in closed loop and return the log (see the module notes).

    Parameters
    ----------
    robot : the arm; its ``prior`` is the controller's model, its limits bound the command.
    t : (K,) s, uniformly spaced reference times (the control rate is 1 / dt).
    q_ref, dq_ref, ddq_ref : (K, n) reference positions (rad or m), velocities, accelerations.
    inertial : (n, 10) TRUE body parameters of the plant.
    joint_params : TRUE joint terms {code: (n,)} (fv N m s/rad, fc N m, fo N m, ia kg m^2).
    settings : :class:`SimulationSettings`.
    progress : draw a progress bar on stderr.

    Returns
    -------
    SimulationResult at the log rate.
    """
    s = settings or SimulationSettings()
    q_ref, dq_ref, ddq_ref = robot.check_states(q_ref, dq_ref, ddq_ref, names=("q_ref", "dq_ref", "ddq_ref"))
    t = np.asarray(t, dtype=float).reshape(-1)
    K = q_ref.shape[0]
    if t.size != K or K < 2:
        raise IdentError(f"trajectory: t has {t.size} samples for {K} positions (need at least 2)")
    dt = np.diff(t)
    if np.any(dt <= 0) or np.ptp(dt) > 1e-6 * dt.mean():
        raise IdentError("trajectory: times must increase at a constant step (the control period)")
    T = float(dt.mean())
    rate = 1.0 / T
    params = robot.check_inertial(inertial)
    jp = check_joint_params(robot, joint_params)
    n = robot.n
    coef = {c: np.ascontiguousarray(jp.get(c, np.zeros(n))) for c in ("fv", "fc", "fo", "ia")}
    for c in ("fv", "fc", "ia"):
        if np.any(coef[c] < 0):
            raise IdentError(f"true joint parameters '{c}': must be non-negative for a passive plant")
    log_rate = rate if s.log_rate is None else float(s.log_rate)
    if not (math.isfinite(log_rate) and log_rate > 0):
        raise IdentError(f"--log-rate: expected a positive number of Hz, got {log_rate:g}")
    if s.substeps < 1:
        raise IdentError(f"--substeps: must be at least 1, got {s.substeps}")
    # the integration runs substeps steps per control tick: bound the work by time
    check_steps(float(K) * s.substeps, f"--substeps {s.substeps}: {K} ticks x substeps")
    log_every = int(round(rate / log_rate))
    if log_every < 1 or abs(rate / log_every - log_rate) > 1e-6 * log_rate:
        raise IdentError(f"--log-rate: {log_rate:g} Hz does not divide the control rate {rate:g} Hz")
    if s.substeps < 1:
        raise IdentError(f"--substeps: must be at least 1, got {s.substeps}")
    if s.encoder_counts < 2 or s.linear_resolution <= 0:
        raise IdentError("encoder resolution: counts must be >= 2 and the linear resolution positive")
    noise = np.broadcast_to(np.asarray(s.torque_noise, dtype=float), (n,)).copy() if np.size(s.torque_noise) in (1, n) else None
    if noise is None or np.any(noise < 0) or not np.all(np.isfinite(noise)):
        raise IdentError(f"--torque-noise: expected one or {n} non-negative numbers")
    if s.bandwidth <= 0 or s.bandwidth > rate / 10:
        raise IdentError(f"--bandwidth: {s.bandwidth:g} Hz must be positive and at most a tenth of the control rate ({rate:g} Hz)")

    res = np.where(robot.joint_type == PRISMATIC, s.linear_resolution, 2 * np.pi / s.encoder_counts)
    # The controller knows only the description's model; it scales its PD gains by the inertia it sees.
    tau_ff = inverse_dynamics(robot, q_ref, dq_ref, ddq_ref)
    Mii = np.diagonal(mass_matrix(robot, q_ref[:1])[0]).copy()
    Mii = np.maximum(Mii, 1e-3 * max(Mii.max(), 1e-9)) + coef["ia"]
    wn = 2 * np.pi * s.bandwidth
    kp = Mii * wn**2
    kd = 2 * s.damping * wn * Mii
    alpha = float(np.exp(-2 * np.pi * s.velocity_cutoff * T))
    tau_max = np.where(np.isfinite(robot.effort_limit), robot.effort_limit, 1e300)

    n_log = (K - 1) // log_every + 1
    q_log = np.empty((n_log, n))
    dq_log = np.empty((n_log, n))
    qt_log = np.empty((n_log, n))
    tau_log = np.empty((n_log, n))
    err2 = np.zeros(n)
    enc0 = np.round(q_ref[0] / res) * res
    state = np.vstack([q_ref[0], dq_ref[0], enc0 - dq_ref[0] * T, dq_ref[0]])
    args = kernel_arrays(robot)
    a0 = -robot.gravity
    sat = 0
    # one simulated second between progress updates, fewer ticks when each has many substeps: the
    # compiled loop cannot be interrupted, so a chunk is kept to about CHUNK_STEPS plant steps and
    # Ctrl-C or SIGTERM is answered within a fraction of a second
    step = max(1, min(int(rate), CHUNK_STEPS // max(int(s.substeps), 1)))
    with Progress(K, "simulate", enabled=progress) as bar:
        for k0 in range(0, K, step):
            k1 = min(K, k0 + step)
            sat += _control_loop(k0, k1, q_ref, dq_ref, tau_ff, state, *args, a0, params, coef["fv"], coef["fc"],
                                 coef["fo"], coef["ia"], float(s.coulomb_eps), kp, kd, res, alpha, tau_max, T,
                                 int(s.substeps), log_every, q_log, dq_log, qt_log, tau_log, err2)
            if not np.all(np.isfinite(state)):
                raise IdentError(f"simulation diverged near t = {t[k0]:.3f} s (reduce --bandwidth or raise --substeps)")
            bar.update(k1, f"t = {t[k1 - 1]:.1f} s")
    rng = np.random.default_rng(s.seed)
    tau_noisy = tau_log + rng.standard_normal(tau_log.shape) * noise
    return SimulationResult(
        joint_names=list(robot.joint_names),
        t=t[::log_every][:n_log] - t[0],
        q=q_log,
        dq=dq_log,
        tau=tau_noisy,
        tau_command=tau_log,
        q_true=qt_log,
        tracking_rms=np.sqrt(err2 / K),
        torque_noise=noise,
        saturated=int(sat),
        settings=s,
    )


def write_log(path, result: SimulationResult, digits: int = 9) -> None:
    """Write a simulated log as CSV in the default table convention, atomically.

    `digits` significant digits: enough for the encoder quantum and the torque noise.
    """
    import pandas as pd

    df = pd.DataFrame(result.columns())
    with atomic_path(path) as tmp:
        df.to_csv(tmp, index=False, float_format=f"%.{digits}g")
