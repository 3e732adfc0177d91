"""Excitation design: periodic Fourier trajectories that are safe to run and informative to log.

Several seeded starts of the penalty problem (:mod:`ident.motion.problem`) under a time budget;
the best feasible design wins. Augment mode adds the information of logs already recorded, so the
criterion is that of the combined data.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.optimize

from ..arm.base import base_parameters
from ..arm.model import PRISMATIC, Robot
from ..blas import single_thread_blas
from ..errors import DataError, IdentError, NumericalError
from ..progress import Progress
from .config import ExcitationConfig
from .constraints import Margins, check_trajectory, feasible, keepout_distances, prior_torque
from .criteria import COND_UNUSABLE, criteria_from_information, information_matrix
from .fourier import REST_TOLERANCE, FourierTrajectory
from .problem import EXPLORE_STAGE, POLISH_STAGES, BudgetExhausted, DesignProblem

#: Share of the time budget the exploration of the starts may use; polishing the best takes the rest.
EXPLORE_SHARE = 0.65


@dataclass
class ExcitationResult:
    """A designed excitation and its report.

    Attributes
    ----------
    trajectory : the :class:`FourierTrajectory`.
    config : the :class:`ExcitationConfig` it satisfies.
    criteria : {"cond", "logdet"} on the controller-rate samples of the written trajectory
        (combined with the earlier logs in augment mode).
    criteria_new : the same for the new trajectory alone.
    criteria_prior : the same for the earlier logs alone (augment mode), else None.
    margins : :class:`Margins` on the check grid and the controller samples.
    starts : per-start records (initial and final criterion, scale, evaluations, stop reason).
    base_names : names of the base parameters the criteria are built on.
    elapsed : optimization wall time, s.
    budget_hit : whether the time budget stopped the optimizer (then results depend on speed).
    """

    robot_name: str
    joint_names: list[str]
    trajectory: FourierTrajectory
    config: ExcitationConfig
    criteria: dict
    criteria_new: dict
    criteria_prior: dict | None
    margins: Margins
    starts: list[dict]
    base_names: list[str]
    elapsed: float
    budget_hit: bool
    joint_units: list[str] = field(default_factory=list)

    def sample(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Controller-rate samples t (N,), q, dq, ddq (N, n) over the configured periods."""
        return self.trajectory.sample(self.config.rate, self.config.periods)


def _check_home(robot: Robot, cfg: ExcitationConfig) -> None:
    """Infeasible requests fail here: home outside the limits, in a keep-out region, or overloaded."""
    where = cfg.source
    lo = cfg.lower + cfg.position_margin
    hi = cfg.upper - cfg.position_margin
    for j, name in enumerate(robot.joint_names):
        if not lo[j] <= cfg.home[j] <= hi[j]:
            raise IdentError(f"{where}: home: joint '{name}' at {cfg.home[j]:.4g} is outside its limits [{lo[j]:.4g}, {hi[j]:.4g}] (margin included)")
        if cfg.offset is not None and not lo[j] <= cfg.offset[j] <= hi[j]:
            raise IdentError(f"{where}: offset: joint '{name}' at {cfg.offset[j]:.4g} is outside its limits [{lo[j]:.4g}, {hi[j]:.4g}] (margin included)")
    h = cfg.home[None, :]
    z = np.zeros_like(h)
    tau = prior_torque(robot, cfg, h, z, z)[0]
    for j, name in enumerate(robot.joint_names):
        if np.isfinite(cfg.torque[j]) and abs(tau[j]) > cfg.torque[j]:
            raise IdentError(f"{where}: home: holding joint '{name}' takes {abs(tau[j]):.4g} of the prior model, above its torque limit {cfg.torque[j]:.4g}")
    for reg, pt, d in keepout_distances(robot, cfg, h):
        if d[0] < 0:
            raise IdentError(f"{where}: keepout: at home, point '{pt.name}' on link '{pt.link}' is {-d[0]:.4g} m inside keep-out region '{reg.name}' (margin included)")


def prior_information(robot: Robot, cfg: ExcitationConfig, logs) -> np.ndarray | None:
    """Information matrix of logs already recorded: a Dataset-like (.q .dq .ddq) or a (q, dq, ddq) tuple."""
    if logs is None:
        return None
    if hasattr(logs, "q") and hasattr(logs, "dq") and hasattr(logs, "ddq"):
        states = (logs.q, logs.dq, logs.ddq)
    elif isinstance(logs, (tuple, list)) and len(logs) == 3:
        states = tuple(logs)
    else:
        raise DataError("augment logs: expected a dataset with q, dq, ddq or a (q, dq, ddq) tuple of (N, n) arrays")
    for arr, nm in zip(states, ("q", "dq", "ddq")):
        if arr is None:
            raise DataError(f"augment logs: {nm} is missing (velocities and accelerations are needed for the regressor)")
    q, dq, ddq = robot.check_states(*states)
    w = None if cfg.torque_noise is None else 1.0 / cfg.torque_noise
    return information_matrix(robot, q, dq, ddq, cfg.terms, w)


def design_excitation(robot: Robot, config: ExcitationConfig | dict, logs=None, progress: bool = False, max_evaluations: int | None = None) -> ExcitationResult:
    """Design an excitation trajectory for `robot` (see the module docstring for the method).

    Parameters
    ----------
    robot : the model; its prior (description inertial values) predicts the torques.
    config : an :class:`ExcitationConfig` or a config mapping (validated here).
    logs : augment mode: data already recorded (a dataset with ``.q .dq .ddq`` (N, n), or a tuple
        of those arrays); the criterion is then that of the earlier data plus the new trajectory.
        Each earlier sample and each new controller-rate sample counts once, so condition the
        earlier logs as the fit will (same decimation) for a fair balance.
    progress : draw a progress bar with the current best criterion on stderr.
    max_evaluations : cap on objective evaluations per start (deterministic stopping for tests).

    Returns
    -------
    ExcitationResult. Deterministic for a seed when the time budget is not hit.

    Raises
    ------
    IdentError for infeasible requests; NumericalError when no start yields a usable trajectory.
    """
    cfg = config if isinstance(config, ExcitationConfig) else ExcitationConfig.from_dict(robot, config)
    _check_home(robot, cfg)
    with single_thread_blas():
        return _design(robot, cfg, logs, progress, max_evaluations)


def polished_count(starts: int) -> int:
    """How many of `starts` explored starts are polished: the best quarter, at least one."""
    return max(1, min(starts, math.ceil(starts / 4)))


def _stage(prob: DesignProblem, z: np.ndarray, mu: float, sharpness, iterations: int, on_eval) -> tuple[np.ndarray, str | None]:
    """One L-BFGS-B stage from `z`: (the best point seen, None or why it stopped early)."""
    prob.mu, prob.sharpness = mu, sharpness
    state = {"z": z.copy(), "f": math.inf}

    def fun(zz):
        f, g = prob.objective(zz)
        if f < state["f"]:
            state["f"], state["z"] = f, zz.copy()
        on_eval()
        return f, g

    try:
        res = scipy.optimize.minimize(fun, z, jac=True, method="L-BFGS-B", options={"maxiter": iterations, "maxcor": 20})
        # L-BFGS-B returns its last iterate; the best point seen is at least as good
        return (res.x if res.fun <= state["f"] else state["z"]), None
    except BudgetExhausted:
        return state["z"], ("time budget" if time.monotonic() > prob.deadline else "evaluation cap")


def _reported(prob: DesignProblem, X: np.ndarray, A0: np.ndarray | None) -> tuple[dict, dict]:
    """Criteria of coefficient rows X as the result reports them: on the controller-rate samples of
    one period, times the periods, combined with the earlier logs; returns (combined, new alone)."""
    cfg = prob.cfg
    traj = FourierTrajectory.from_coefficients(prob.robot.joint_names, cfg.period, X, cfg.home)
    _, q, dq, ddq = traj.sample(cfg.rate, 1)
    w = None if cfg.torque_noise is None else 1.0 / cfg.torque_noise
    A_new = information_matrix(prob.robot, q[:-1], dq[:-1], ddq[:-1], cfg.terms, w, prob.bp) * cfg.periods
    crit_new = criteria_from_information(A_new)
    return (criteria_from_information(A_new + A0) if A0 is not None else crit_new), crit_new


def _value(kind: str, crit: dict) -> float:
    return crit["cond"] if kind == "cond" else -crit["logdet"]


def _design(robot: Robot, cfg: ExcitationConfig, logs, progress: bool, max_evaluations: int | None) -> ExcitationResult:
    A0 = prior_information(robot, cfg, logs)
    prob = DesignProblem(robot, cfg, A0)
    rng = np.random.default_rng(cfg.seed)
    start_clock = time.monotonic()
    cap = max_evaluations if max_evaluations is not None else math.inf
    kind = cfg.criterion
    timed = cfg.budget is not None
    deadline = start_clock + cfg.budget if timed else math.inf
    # the exploration of the starts may use this share of the budget, the polish the rest
    explore_end = start_clock + EXPLORE_SHARE * cfg.budget if timed else math.inf
    n_polish = polished_count(cfg.starts)
    records, cands = [], []  # cands: [reported value, record index, optimizer point z, coefficients X, criteria]
    budget_hit = False
    label = "excite" if logs is None else "excite (augment)"
    best = None
    done = [0.0]

    def note() -> str:
        head = f"start {min(len(records) + 1, cfg.starts)}/{cfg.starts}" if len(records) < cfg.starts or not cands else "polishing"
        if best is None:
            return head
        return head + (f", best cond {best[4]['cond']:.4g}" if kind == "cond" else f", best logdet {best[4]['logdet']:.5g}")

    with Progress(cfg.starts + n_polish, label, enabled=progress) as bar:

        def on_eval():
            bar.update(done[0] + min(prob.evals / max(cfg.max_iterations, 1), 0.99), note())

        # -- exploration: every start descends the smooth criterion at a moderate penalty
        for k in range(cfg.starts):
            now = time.monotonic()
            if k > 0 and now > explore_end:  # the first start always runs: a result, however short
                budget_hit = True
                break
            t_rep = time.monotonic()
            z0 = prob.screened_start(rng)
            s0, _ = prob.repair(z0, s_max=math.inf)
            t_rep = time.monotonic() - t_rep
            z = z0 * s0
            # an equal share of what is left of the exploration, less the closing repair and checks
            prob.deadline = now + (explore_end - now) / (cfg.starts - k) - 2.0 * t_rep if timed else math.inf
            init = prob.criterion(prob.coeffs(z))[kind]
            prob.evals = 0
            prob.eval_cap = cap
            mu, sharp = EXPLORE_STAGE
            z, stop = _stage(prob, z, mu, sharp, cfg.max_iterations, on_eval)
            budget_hit = budget_hit or stop == "time budget"
            s, _ = prob.repair(z)
            X = prob.coeffs(z, s)
            crit, _ = _reported(prob, X, A0)
            records.append({"start": k, "initial": init, "explored": crit[kind], "final": crit[kind], "scale": s, "evaluations": prob.evals,
                            "stop": stop or "converged", "polished": False})
            if s > 0 and np.isfinite(_value(kind, crit)):
                cands.append([_value(kind, crit), k, z, X, crit])
                if best is None or cands[-1][0] < best[0]:
                    best = cands[-1]
            done[0] = k + 1.0
            bar.update(done[0], note())
        # -- polish: the best starts go on at rising penalties to the exact criterion
        chosen = sorted(cands, key=lambda c: (c[0], c[1]))[:n_polish]
        for i, cand in enumerate(chosen):
            now = time.monotonic()
            if now > deadline:
                budget_hit = True
                break
            rec = records[cand[1]]
            prob.deadline = now + (deadline - now) / (len(chosen) - i) - 2.0 * t_rep if timed else math.inf
            prob.evals = 0
            z, stop = cand[2], None
            for mu, sharp, share in POLISH_STAGES:
                z, stop = _stage(prob, z, mu, sharp, max(1, round(share * cfg.max_iterations)), on_eval)
                if stop:
                    break
            budget_hit = budget_hit or stop == "time budget"
            s, _ = prob.repair(z)
            X = prob.coeffs(z, s)
            crit, _ = _reported(prob, X, A0)
            rec.update(polished=True, evaluations=rec["evaluations"] + prob.evals, stop=stop or rec["stop"])
            if s > 0 and _value(kind, crit) < cand[0]:  # polishing that lost ground keeps the explored design
                cand[:] = [_value(kind, crit), cand[1], z, X, crit]
                rec.update(final=crit[kind], scale=s)
                if cand[0] < best[0]:
                    best = cand
            done[0] = cfg.starts + i + 1.0
            bar.update(done[0], note())
        bar.update(cfg.starts + n_polish, note())
    elapsed = time.monotonic() - start_clock
    if best is None:
        raise NumericalError(f"{cfg.source}: no start produced a usable trajectory: the limits and keep-out regions leave too little room around home for an informative motion")
    traj = FourierTrajectory.from_coefficients(robot.joint_names, cfg.period, best[3], cfg.home)
    fine = np.concatenate([prob.tcheck, prob.tctrl])
    margins = check_trajectory(robot, cfg, traj, fine)
    if not feasible(margins):  # pragma: no cover - repair guarantees this; a loud failure if not
        raise NumericalError(f"{cfg.source}: the designed trajectory violates: {'; '.join(margins.violations(robot.joint_names))}")
    crit_all, crit_new = _reported(prob, best[3], A0)
    crit_prior = criteria_from_information(A0) if A0 is not None else None
    if not crit_all["cond"] < COND_UNUSABLE:
        raise NumericalError(f"{cfg.source}: the best trajectory found leaves base parameters unidentifiable (condition number {crit_all['cond']:.3g}); the limits leave too little room: widen them or add harmonics")
    units = ["m" if jt == PRISMATIC else "rad" for jt in robot.joint_type]
    return ExcitationResult(robot.name, list(robot.joint_names), traj, cfg, crit_all, crit_new, crit_prior, margins, records, list(prob.bp.names), elapsed, budget_hit, units)


def random_feasible(robot: Robot, config: ExcitationConfig | dict, count: int, seed: int = 0) -> list[tuple[FourierTrajectory, dict]]:
    """`count` random trajectories of the design family, each scaled to the largest feasible motion.

    The baseline an optimized design should beat; returns (trajectory, criteria on the design grid).
    """
    cfg = config if isinstance(config, ExcitationConfig) else ExcitationConfig.from_dict(robot, config)
    _check_home(robot, cfg)
    prob = DesignProblem(robot, cfg, None)
    rng = np.random.default_rng(seed)
    out = []
    with single_thread_blas():
        for _ in range(count):
            z = prob.random_z(rng)
            s, _ = prob.repair(z, s_max=math.inf)
            X = prob.coeffs(z, s)
            out.append((FourierTrajectory.from_coefficients(robot.joint_names, cfg.period, X, cfg.home), prob.criterion(X)))
    return out


def design_criteria(robot: Robot, config: ExcitationConfig, traj: FourierTrajectory) -> dict:
    """Both criteria of `traj` on the design grid of `config` (what the optimizer minimizes)."""
    prob = DesignProblem(robot, config, None)
    return prob.criterion(traj.coefficients)


def verify_trajectory(robot: Robot, config: ExcitationConfig, traj: FourierTrajectory, where: str = "coefficients") -> ExcitationResult:
    """Re-check an existing trajectory against `config` (e.g. new limits) and report it.

    Raises IdentError listing every violated constraint, or naming the joint that does not start
    and end at rest at home (an edited coefficients file); otherwise returns a result with both
    criteria and the margins, as :func:`design_excitation` would. `where` names the file in errors.
    """
    cfg = config
    if traj.joint_names != robot.joint_names:
        raise IdentError(f"{where}: joints {', '.join(traj.joint_names)} do not match the robot's {', '.join(robot.joint_names)}")
    # the limit checks cannot see a velocity or acceleration step at switch-on: the motion must
    # leave and reach home at rest (t = 0 is also every period's end)
    q0, dq0, ddq0 = (v[0] for v in traj.evaluate(np.zeros(1)))
    for k, name in enumerate(traj.joint_names):
        off = {"position - home": q0[k] - traj.home[k], "velocity": dq0[k], "acceleration": ddq0[k]}
        bad = {key: v for key, v in off.items() if abs(v) > REST_TOLERANCE}
        if bad:
            raise IdentError(f"{where}: joint '{name}' does not start and end at rest at home ("
                             + ", ".join(f"{key} {v:.3g}" for key, v in bad.items()) + " at t = 0): not a trajectory ident designed, or edited")
    if abs(traj.period - cfg.period) > 1e-12 * cfg.period:
        cfg = cfg.with_options(period=traj.period)
    cfg = cfg.with_options(harmonics=traj.harmonics, home=traj.home.copy())
    _check_home(robot, cfg)
    t, q, dq, ddq = traj.sample(cfg.rate, 1)
    n_check = cfg.design_samples * cfg.check_factor
    fine = np.concatenate([np.arange(n_check) * (cfg.period / n_check), t])
    m = check_trajectory(robot, cfg, traj, fine)
    bad = m.violations(robot.joint_names)
    if bad:
        raise IdentError(f"{cfg.source}: the trajectory violates: {'; '.join(bad)}")
    w = None if cfg.torque_noise is None else 1.0 / cfg.torque_noise
    A = information_matrix(robot, q[:-1], dq[:-1], ddq[:-1], cfg.terms, w) * cfg.periods
    crit = criteria_from_information(A)
    bp = base_parameters(robot, cfg.terms)
    units = ["m" if jt == PRISMATIC else "rad" for jt in robot.joint_type]
    return ExcitationResult(robot.name, list(robot.joint_names), traj, cfg, crit, crit, None, m, [], list(bp.names), 0.0, False, units)
