"""The excitation design as a penalty problem over the null-space coordinates of the Fourier family.

Minimized by L-BFGS-B with exact gradients (the regressor's state sensitivities come from one
adjoint sweep a sample, :mod:`ident.arm.contraction`). A candidate is
made feasible by scaling its motion about the particular solution (home at rest) until every
constraint holds on a grid `check_factor` times finer than the design grid and on the
controller-rate samples, with a cushion for excursions between samples.
"""

from __future__ import annotations

import math
import time

import numpy as np

from ..arm.base import base_parameters
from ..arm.contraction import contraction_gradient
from ..arm.dynamics import body_poses, point_motion
from ..arm.model import Robot
from ..arm.regressor import regressor_into
from ..errors import IdentError
from .config import ExcitationConfig
from .config_values import period_ticks
from .constraints import _KEEPOUT_SCALE, Margins, check_trajectory, feasible, prior_torque
from .criteria import criteria_from_information, criterion_grad
from .fourier import FourierTrajectory, fourier_basis

#: Random directions screened for each optimizer start.
SCREEN = 8

#: The exploring stage of every start: penalty weight and power-mean exponent of the smooth
#: condition number (see :func:`ident.motion.criteria.criterion_grad`).
EXPLORE_STAGE = (1e3, 8.0)

#: The polishing stages of the best starts: penalty weight, exponent (None: the exact condition
#: number) and share of ``max_iterations``. Rising weights pin the limits, so the final scaling back
#: into the feasible set costs almost nothing.
POLISH_STAGES = ((1e4, 32.0, 1.0), (1e6, None, 1.0 / 3.0))


class BudgetExhausted(Exception):
    pass


class DesignProblem:
    """Penalized design criterion over the null-space coordinates z (n, k) of the rest equations."""

    def __init__(self, robot: Robot, cfg: ExcitationConfig, prior_info: np.ndarray | None):
        self.robot, self.cfg = robot, cfg
        n, L = robot.n, cfg.harmonics
        self.m = 2 * L + 1
        self.bp = base_parameters(robot, cfg.terms)
        # rest equations at t = 0: rows of Phi(0), dPhi(0), ddPhi(0) (and the offset row)
        phi0, dphi0, ddphi0 = fourier_basis([0.0], cfg.period, L)
        E = [phi0[0], dphi0[0], ddphi0[0]]
        if cfg.offset is not None:
            E.append(np.eye(self.m)[0])
        E = np.array(E)
        _, s, Vt = np.linalg.svd(E)
        self.Z = Vt[len(E) :].T  # (m, k) orthonormal null space
        self.k = self.Z.shape[1]
        self.Xp = np.zeros((n, self.m))
        # particular solution: the offset (home when free) plus the smallest harmonics that meet
        # the rest equations; with a free offset that is home at rest, so scaling z to 0 is safe
        for i in range(n):
            x0 = cfg.home[i] if cfg.offset is None else cfg.offset[i]
            rhs = np.array([cfg.home[i], 0.0, 0.0] + ([x0] if cfg.offset is not None else []))
            self.Xp[i, 0] = x0
            self.Xp[i, 1:] = np.linalg.lstsq(E[:, 1:], rhs - E[:, 0] * x0, rcond=None)[0]
        N = cfg.design_samples
        self.t = np.arange(N) * (cfg.period / N)
        self.Phi = fourier_basis(self.t, cfg.period, L)
        self.tcheck = np.arange(N * cfg.check_factor) * (cfg.period / (N * cfg.check_factor))
        self.tctrl = np.arange(period_ticks(cfg.period, cfg.rate, "rate") + 1) / cfg.rate
        self.w_row = np.ones(n) if cfg.torque_noise is None else 1.0 / cfg.torque_noise
        # each design sample stands for this many logged samples of the new trajectory
        self.factor = cfg.rate * cfg.period * cfg.periods / N
        self.A0 = np.zeros((self.bp.n_base, self.bp.n_base)) if prior_info is None else prior_info
        p_in = 10 * n
        ind = self.bp.independent
        self.inert_cols = ind[ind < p_in]
        self.inert_pos = np.flatnonzero(ind < p_in)
        nt = len(cfg.terms)
        self.term_cols = []  # (position in base, joint, code)
        for pos in np.flatnonzero(ind >= p_in):
            c = ind[pos] - p_in
            self.term_cols.append((pos, c // nt, cfg.terms[c % nt]))
        self.prior_flat = robot.prior.reshape(-1)
        self.Yin = np.empty((N, n, p_in))
        self.sharpness = None  # power-mean exponent of the smooth condition number (None: exact)
        self.v_smooth = 0.01 * cfg.velocity
        self.mu = 1.0
        self.evals = 0
        self.deadline = math.inf
        self.eval_cap = math.inf

    # -- coefficient maps --------------------------------------------------------------------
    def coeffs(self, z: np.ndarray, s: float = 1.0) -> np.ndarray:
        return self.Xp + s * (z.reshape(self.robot.n, self.k) @ self.Z.T)

    def trajectory(self, z: np.ndarray, s: float = 1.0) -> FourierTrajectory:
        return FourierTrajectory.from_coefficients(self.robot.joint_names, self.cfg.period, self.coeffs(z, s), self.cfg.home)

    # -- criterion ---------------------------------------------------------------------------
    def base_rows(self, q, dq, ddq, Yin, smooth: bool = False) -> np.ndarray:
        """Base regressor (N, n, b) from the inertial regressor and analytic joint-term columns.

        With `smooth`, the Coulomb column is tanh(q' / v_s) instead of sign(q'), so the
        optimizer's objective is differentiable (v_s: 1 % of each joint's velocity limit).
        """
        N, n = q.shape
        Yb = np.zeros((N, n, self.bp.n_base))
        Yb[:, :, self.inert_pos] = Yin[:, :, self.inert_cols]
        for pos, j, code in self.term_cols:
            if code == "fc":
                Yb[:, j, pos] = np.tanh(dq[:, j] / self.v_smooth[j]) if smooth else np.sign(dq[:, j])
            else:
                Yb[:, j, pos] = {"fv": dq[:, j], "fo": 1.0, "ia": ddq[:, j]}[code]
        return Yb

    def information(self, Yb) -> np.ndarray:
        Wb = (Yb * self.w_row[None, :, None]).reshape(-1, Yb.shape[2])
        return self.A0 + self.factor * (Wb.T @ Wb)

    def criterion(self, X: np.ndarray) -> dict:
        """Both criteria of coefficient rows X on the design grid (combined with prior data)."""
        phi, dphi, ddphi = self.Phi
        q, dq, ddq = phi @ X.T, dphi @ X.T, ddphi @ X.T
        Yin = np.empty((q.shape[0], self.robot.n, 10 * self.robot.n))
        regressor_into(self.robot, np.ascontiguousarray(q), np.ascontiguousarray(dq), np.ascontiguousarray(ddq), Yin, ())
        return criteria_from_information(self.information(self.base_rows(q, dq, ddq, Yin)))

    # -- penalized objective with gradient -----------------------------------------------------
    def objective(self, zflat: np.ndarray) -> tuple[float, np.ndarray]:
        if time.monotonic() > self.deadline or self.evals >= self.eval_cap:
            raise BudgetExhausted
        self.evals += 1
        robot, cfg = self.robot, self.cfg
        n, N = robot.n, self.t.size
        X = self.coeffs(zflat)
        phi, dphi, ddphi = self.Phi
        q, dq, ddq = phi @ X.T, dphi @ X.T, ddphi @ X.T
        q, dq, ddq = (np.ascontiguousarray(x) for x in (q, dq, ddq))
        Yin = regressor_into(robot, q, dq, ddq, self.Yin, ())
        Yb = self.base_rows(q, dq, ddq, Yin, smooth=True)
        A = self.information(Yb)
        f, GA = criterion_grad(A, cfg.criterion, self.sharpness)
        if not np.isfinite(f):
            f, GA = 50.0, np.zeros_like(A)  # rank-deficient point: flat high value, penalties still steer
        b = Yb.shape[2]
        GY = 2.0 * self.factor * (self.w_row**2)[None, :, None] * (Yb.reshape(-1, b) @ GA).reshape(N, n, b)  # (N, n, b)
        gq = np.zeros((N, n))
        gdq = np.zeros((N, n))
        gddq = np.zeros((N, n))
        for pos, j, code in self.term_cols:
            if code == "fv":
                gdq[:, j] += GY[:, j, pos]
            elif code == "fc":
                gdq[:, j] += GY[:, j, pos] * (1.0 - Yb[:, j, pos] ** 2) / self.v_smooth[j]
            elif code == "ia":
                gddq[:, j] += GY[:, j, pos]
        pen = 0.0
        mu = self.mu
        # kinematic limits (normalized violations, mean over the grid)
        lo = cfg.lower + cfg.position_margin
        hi = cfg.upper - cfg.position_margin
        fin = np.isfinite(lo) & np.isfinite(hi)
        if np.any(fin):
            v_hi = np.where(fin, np.maximum(q - np.where(fin, hi, 0.0), 0.0), 0.0)
            v_lo = np.where(fin, np.maximum(np.where(fin, lo, 0.0) - q, 0.0), 0.0)
            pen += mu * (np.sum(v_hi**2) + np.sum(v_lo**2)) / N
            gq += mu * 2.0 * (v_hi - v_lo) / N
        for arr, lim, g in ((dq, cfg.velocity, gdq), (ddq, cfg.acceleration, gddq)):
            v = np.maximum(np.abs(arr) / lim - 1.0, 0.0)
            pen += mu * np.sum(v**2) / N
            g += mu * 2.0 * v * np.sign(arr) / lim / N
        # torque of the prior model
        tau = prior_torque(robot, cfg, q, dq, ddq, Yin)
        tfin = np.isfinite(cfg.torque)
        Gtau = np.zeros((N, n))
        if np.any(tfin):
            tl = np.where(tfin, cfg.torque, 1.0)
            v = np.where(tfin, np.maximum(np.abs(tau) / tl - 1.0, 0.0), 0.0)
            pen += mu * np.sum(v**2) / N
            Gtau = mu * 2.0 * v * np.sign(tau) / tl / N
            tm = cfg.torque_model
            if "fv" in tm:
                gdq += Gtau * tm["fv"]
            if "ia" in tm:
                gddq += Gtau * tm["ia"]
        # keep-out regions
        if cfg.regions:
            for reg, pt, d, grad_x, J in self._keepout_terms(q):
                v = np.maximum(-d / _KEEPOUT_SCALE, 0.0)
                pen += mu * np.sum(v**2) / N
                gx = -mu * 2.0 * v[:, None] * grad_x / _KEEPOUT_SCALE / N  # (N, 3)
                gq += np.einsum("nk,nki->ni", gx, J)
        # chain through the regressor: the gradient on the inertial regressor (criterion and prior
        # torque) contracted with Y's state derivatives, by one adjoint sweep a sample
        Gfull = Gtau[:, :, None] * self.prior_flat[None, None, :]
        Gfull[:, :, self.inert_cols] += GY[:, :, self.inert_pos]
        _, cq, cdq, cddq = contraction_gradient(robot, q, dq, ddq, Gfull)
        gq += cq
        gdq += cdq
        gddq += cddq
        GX = gq.T @ phi + gdq.T @ dphi + gddq.T @ ddphi  # (n, m)
        return f + pen, (GX @ self.Z).reshape(-1)

    def _keepout_terms(self, q: np.ndarray):
        """Per (region, point): distance beyond the margin (N,), its gradient in x (N, 3) and the
        point's position Jacobian (N, 3, n), from one kinematics pass at the states `q` (N, n)."""
        Rw, pw = body_poses(self.robot, q)
        cache = {}
        for reg in self.cfg.regions:
            for pt in self.cfg.points:
                if reg.points is not None and pt.name not in reg.points:
                    continue
                if pt.name not in cache:
                    cache[pt.name] = point_motion(self.robot, Rw, pw, pt.link, pt.point)
                x, J = cache[pt.name]
                d, g = reg.distance(x)
                yield reg, pt, d - reg.margin, g, J

    # -- feasibility by scaling ------------------------------------------------------------------
    def margins(self, z, s, times, cushion=True) -> Margins:
        return check_trajectory(self.robot, self.cfg, self.trajectory(z, s), times, cushion)

    def repair(self, z: np.ndarray, s_max: float = 1.0, tol: float = 1e-3) -> tuple[float, Margins]:
        """Largest scale s in [0, s_max] (to relative `tol`) with every constraint met on the check
        grid and the controller samples; returns (s, margins there).

        s = 0 is the particular solution (home at rest for a free offset), feasible by the checks
        of :func:`_check_home`; a fixed offset whose particular solution fails raises IdentError.
        """
        fine = np.concatenate([self.tcheck, self.tctrl])
        m0 = self.margins(z, 0.0, fine)
        if not feasible(m0):
            what = "the fixed offset" if self.cfg.offset is not None else "home at rest"
            raise IdentError(f"{self.cfg.source}: {what} already violates: {'; '.join(m0.violations(self.robot.joint_names))}")
        s_hi = self._kinematic_scale(z, s_max)
        if not s_hi > 0:
            return 0.0, m0
        m = self.margins(z, s_hi, fine)
        if feasible(m):
            return s_hi, m

        def bisect(lo, hi, times):
            # bounded: a scale below 2^-60 of the kinematic one is no motion (a huge torque guess
            # can make every s > 0 infeasible), so the repair's time is bounded whatever the config
            for _ in range(60):
                if hi - lo <= tol * hi:
                    break
                mid = 0.5 * (lo + hi)
                if feasible(self.margins(z, mid, times)):
                    lo = mid
                else:
                    hi = mid
            return lo

        # the design grid is cheap: bracket there, then settle on the fine grids
        s = bisect(0.0, s_hi, self.t)
        m = self.margins(z, s, fine)
        if not feasible(m):
            s = bisect(0.0, s, fine)
            m = self.margins(z, s, fine)
        return s, m

    def _kinematic_scale(self, z, s_max):
        """Largest s <= s_max for which the kinematic limits hold on the check grid (linear in s)."""
        cfg = self.cfg
        phi, dphi, ddphi = fourier_basis(self.tcheck, cfg.period, cfg.harmonics)
        D = z.reshape(self.robot.n, self.k) @ self.Z.T
        s = s_max
        lo = cfg.lower + cfg.position_margin
        hi = cfg.upper - cfg.position_margin
        for B, bl, bh in ((phi, lo, hi), (dphi, -cfg.velocity, cfg.velocity), (ddphi, -cfg.acceleration, cfg.acceleration)):
            p = B @ self.Xp.T
            d = B @ D.T
            with np.errstate(divide="ignore", invalid="ignore"):
                up = np.where(d > 0, (bh - p) / d, np.inf)
                dn = np.where(d < 0, (bl - p) / d, np.inf)
            s = min(s, float(np.nanmin(up)), float(np.nanmin(dn)))
        return max(s, 0.0)

    def screened_start(self, rng: np.random.Generator, candidates: int = SCREEN) -> np.ndarray:
        """The best of `candidates` random directions, each scaled to its kinematic limits (cheap:
        no torque or keep-out check), by the design criterion."""
        best, best_val = None, math.inf
        for _ in range(candidates):
            z = self.random_z(rng)
            X = self.coeffs(z, self._kinematic_scale(z, math.inf))
            c = self.criterion(X)
            val = c["cond"] if self.cfg.criterion == "cond" else -c["logdet"]
            if best is None or val < best_val:
                best, best_val = z, val
        return best

    def random_z(self, rng: np.random.Generator) -> np.ndarray:
        """Random null-space coordinates; harmonic l weighted 1/l so low harmonics dominate."""
        L = self.cfg.harmonics
        wgt = np.concatenate([[1.0], 1.0 / np.arange(1, L + 1), 1.0 / np.arange(1, L + 1)])
        x = rng.standard_normal((self.robot.n, self.m)) * wgt
        # scale by the velocity limit so every joint moves comparably
        x *= self.cfg.velocity[:, None]
        return (x @ self.Z).reshape(-1)
