"""A second plant for tests: the arm simulated by MuJoCo, an engine that shares no code with ident.

ident's own simulator integrates the same equations the fit assumes, so a fit on its logs can
look perfect while a real arm would show its bias. Here the plant is MuJoCo (the ``mujoco``
package from the registry) reading the robot's URDF, with

* masses "as built": a few links' masses and inertias scaled by 0.85-1.2 (density scaling, so the
  body stays physically consistent) and their centres of mass shifted by a few millimetres, seeded;
  the fit only gets the original URDF, whose values are therefore off;
* per joint rotor inertia ``dof_armature`` (ia), viscous friction ``dof_damping`` (fv) and dry
  friction ``dof_frictionloss`` (fc). MuJoCo treats dry friction as a soft constraint; its
  softness is set here (:func:`_soften_dry_friction`) so that at steady speed the force is
  fc clip(q'/vs, -1, 1): it ramps linearly through zero speed and reaches its level at vs
  (30-50 mrad/s), so it is NOT fc sign(q') (:func:`friction_ramp` measures the curve);
* no contacts and no joint-limit constraints (the reference trajectories stay inside the limits).

A joint-space controller at 1 kHz (PD on the motor-side encoder and its filtered finite-difference
velocity, plus rigid-body feed-forward computed beforehand with ``ident.inverse_dynamics`` from
the *description's* values, no friction compensation) applies its torque through
``data.qfrc_applied`` with a zero-order hold over the control period. The log holds what a real
arm reports: the joint encoder position (2^17 counts per revolution) and the applied motor torque
plus Gaussian noise, at 1 kHz, written in ident's default table convention (``time``,
``<joint>.q``, ``<joint>.tau``).

Used only by tests and ``scripts/eval_second_plant.py``; import it from there as ``mujoco_plant``.
"""

from __future__ import annotations

import copy
import tempfile
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path

import mujoco
import numpy as np
from conftest import PANDA, PANDA_FINGERS_LOCKED, UR5, erd_path

import ident

#: Control and log rate, Hz.
RATE = 1000.0
#: Physics steps per control period (MuJoCo step 0.2 ms).
SUBSTEPS = 5
#: Joint encoder counts per revolution (the logged position).
ENCODER_COUNTS = 2**17
#: Counts per joint revolution of the motor-side encoder the drive closes its loop on (2^17
#: counts behind a 1:100 gear). Differentiating the 2^17-count joint reading at 1 kHz would put
#: about 1 N m of chatter into the commanded torque of the large joints, which no log could
#: explain (the motion it causes is far below one count).
CONTROL_COUNTS = 2**17 * 100
#: Standard deviation of the Gaussian noise on the logged torque, N m.
TORQUE_NOISE = 0.3
#: Impedance d of MuJoCo's soft dry-friction constraint (solimp dmin = dmax). MuJoCo's default
#: 0.9 lets the constraint absorb 90 % of the net torque on a joint whose friction is not
#: saturated, which makes the joints of the heavy arm stick at reversals; 0.05 leaves 5 %.
FRICTION_IMPEDANCE = 0.05


@dataclass(frozen=True)
class ArmSpec:
    """An arm of the test plant: description, locked joints, home pose, joint terms of the plant.

    ``fv`` (N m s/rad), ``fc`` (N m, MuJoCo frictionloss level) and ``ia`` (kg m^2) are per joint,
    invented but of the size geared arms of this class show; ``vs`` (rad/s) is the speed at
    which the dry friction reaches its level (the width of its ramp through zero speed, see
    :func:`build_plant`). ``changed_links`` is how many links get "as built" masses.
    """

    key: str
    urdf: str
    locked: dict
    home: tuple
    fv: tuple
    fc: tuple
    ia: tuple
    vs: tuple
    changed_links: int = 3
    margin: float = 0.25  # rad kept from each joint limit by the reference trajectories


ARMS = {
    "ur5": ArmSpec(
        key="ur5",
        urdf=UR5,
        locked={},
        home=(0.0, -1.5708, 1.5708, -1.5708, -1.5708, 0.0),
        fv=(6.0, 5.0, 3.0, 1.0, 0.8, 0.6),
        fc=(5.0, 4.5, 3.0, 1.2, 1.0, 0.8),
        ia=(0.40, 0.40, 0.20, 0.06, 0.05, 0.05),
        vs=(0.03, 0.03, 0.03, 0.05, 0.05, 0.05),
    ),
    "panda": ArmSpec(
        key="panda",
        urdf=PANDA,
        locked=dict(PANDA_FINGERS_LOCKED),
        home=(0.0, -0.3, 0.0, -2.0, 0.0, 1.9, 0.785),
        fv=(2.0, 2.0, 1.5, 1.5, 0.6, 0.5, 0.4),
        fc=(1.2, 1.2, 1.0, 1.0, 0.5, 0.4, 0.4),
        ia=(0.25, 0.25, 0.20, 0.20, 0.06, 0.05, 0.05),
        vs=(0.03, 0.03, 0.03, 0.03, 0.05, 0.05, 0.05),
        changed_links=4,
    ),
}


# --------------------------------------------------------------------------------------------
# URDF conversion
# --------------------------------------------------------------------------------------------
def _floats(text: str | None, default: str) -> np.ndarray:
    return np.array([float(v) for v in (text or default).split()])


def _text(v) -> str:
    return " ".join(format(float(x), ".17g") for x in np.atleast_1d(v))


def _rpy_matrix(rpy: np.ndarray) -> np.ndarray:
    # URDF: R = Rz(yaw) Ry(pitch) Rx(roll)
    r, p, y = rpy
    cr, sr, cp, sp, cy, sy = np.cos(r), np.sin(r), np.cos(p), np.sin(p), np.cos(y), np.sin(y)
    return np.array([[cy * cp, cy * sp * sr - sy * cr, cy * sp * cr + sy * sr],
                     [sy * cp, sy * sp * sr + cy * cr, sy * sp * cr - cy * sr],
                     [-sp, cp * sr, cp * cr]])


def plant_urdf(path, locked: dict, changes: dict | None = None) -> str:
    """URDF text for MuJoCo (and for ident, to get the plant's true values).

    Drops ``<visual>``, ``<collision>``, ``<gazebo>``, ``<transmission>`` and ``<ros2_control>``;
    turns each locked joint into a fixed joint at its locked position (prismatic: the origin moves
    along the axis); applies ``changes`` {link: (mass scale, (3,) COM shift m in the link frame)};
    adds ``<mujoco><compiler fusestatic="false" discardvisual="true"/></mujoco>`` so MuJoCo keeps
    every body and ignores meshes.
    """
    root = ET.parse(path).getroot()
    for tag in ("gazebo", "transmission", "ros2_control"):
        for el in root.findall(tag):
            root.remove(el)
    for link in root.findall("link"):
        for tag in ("visual", "collision"):
            for el in link.findall(tag):
                link.remove(el)
    for j in root.findall("joint"):
        name = j.get("name")
        if name not in locked:
            continue
        o = j.find("origin")
        if o is None:
            o = ET.SubElement(j, "origin")
        xyz, rpy = _floats(o.get("xyz"), "0 0 0"), _floats(o.get("rpy"), "0 0 0")
        axis_el = j.find("axis")
        axis = _floats(None if axis_el is None else axis_el.get("xyz"), "1 0 0")
        axis /= np.linalg.norm(axis)
        if j.get("type") == "prismatic":
            xyz = xyz + _rpy_matrix(rpy) @ axis * float(locked[name])
        else:  # revolute/continuous: the child frame turns about the axis
            c, s = np.cos(locked[name]), np.sin(locked[name])
            K = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
            R = _rpy_matrix(rpy) @ (np.eye(3) + s * K + (1 - c) * K @ K)
            rpy = np.array([np.arctan2(R[2, 1], R[2, 2]), np.arcsin(-np.clip(R[2, 0], -1, 1)), np.arctan2(R[1, 0], R[0, 0])])
        o.set("xyz", _text(xyz))
        o.set("rpy", _text(rpy))
        j.set("type", "fixed")
        for tag in ("axis", "limit", "mimic", "dynamics", "safety_controller", "calibration"):
            for el in j.findall(tag):
                j.remove(el)
    for name, (scale, shift) in (changes or {}).items():
        link = root.find(f"link[@name='{name}']")
        inertial = link.find("inertial")
        mass = inertial.find("mass")
        mass.set("value", format(float(mass.get("value")) * scale, ".17g"))
        inertia = inertial.find("inertia")
        for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz"):
            inertia.set(k, format(float(inertia.get(k, "0")) * scale, ".17g"))
        o = inertial.find("origin")
        if o is None:
            o = ET.SubElement(inertial, "origin")
        o.set("xyz", _text(_floats(o.get("xyz"), "0 0 0") + np.asarray(shift)))
    mj = ET.Element("mujoco")
    ET.SubElement(mj, "compiler", fusestatic="false", discardvisual="true")
    root.insert(0, mj)
    return ET.tostring(root, encoding="unicode")


def as_built_changes(path, locked: dict, count: int, seed: int) -> dict:
    """Seeded "as built" deviations: {link: (mass scale in [0.85, 1.2], COM shift (3,) m, |shift| <= 1 cm)}.

    Chosen among links with mass that a joint moves (not the root link); scaling mass and inertia
    together and shifting the COM keeps every body physically consistent.
    """
    rng = np.random.default_rng(seed)
    root = ET.parse(path).getroot()
    children = {j.find("child").get("link") for j in root.findall("joint")}
    candidates = []
    for link in root.findall("link"):
        m = link.find("inertial/mass")
        if link.get("name") in children and m is not None and float(m.get("value")) > 0.05:
            candidates.append(link.get("name"))
    picked = rng.choice(len(candidates), size=min(count, len(candidates)), replace=False)
    out = {}
    for i in sorted(picked):
        shift = rng.normal(0.0, 0.005, 3)
        shift *= min(1.0, 0.01 / np.linalg.norm(shift))
        out[candidates[i]] = (float(rng.uniform(0.85, 1.2)), shift)
    return out


# --------------------------------------------------------------------------------------------
# The plant
# --------------------------------------------------------------------------------------------
@dataclass
class Log:
    """A closed-loop run at the control rate: t (K,) s; q (encoder), tau (logged = applied + noise),
    tau_applied, q_true, dq_true, friction (MuJoCo dry-friction force on each joint), q_ref (K, n)."""

    joint_names: list[str]
    t: np.ndarray
    q: np.ndarray
    tau: np.ndarray
    tau_applied: np.ndarray
    q_true: np.ndarray
    dq_true: np.ndarray
    friction: np.ndarray
    q_ref: np.ndarray
    noise: float
    saturated: int = 0

    def write_csv(self, path) -> Path:
        """Write ``time``, ``<joint>.q``, ``<joint>.tau`` (ident's default table convention)."""
        import pandas as pd

        cols = {"time": self.t}
        cols.update({f"{j}.q": self.q[:, i] for i, j in enumerate(self.joint_names)})
        cols.update({f"{j}.tau": self.tau[:, i] for i, j in enumerate(self.joint_names)})
        path = Path(path)
        pd.DataFrame(cols).to_csv(path, index=False, float_format="%.12g")
        return path


@dataclass
class Plant:
    """An arm in MuJoCo with "as built" masses, plant friction and armature.

    Attributes: ``spec``; ``description`` (ident model of the original URDF: what the fit and the
    controller get); ``truth`` (ident model of the plant's URDF: its ``prior`` holds the plant's
    true inertial values in ident's body frames); ``model`` (mujoco.MjModel); ``changes`` (the
    as-built deviations); ``urdf_text``.
    """

    spec: ArmSpec
    description: ident.Robot
    truth: ident.Robot
    model: object
    changes: dict
    urdf_text: str
    fv: np.ndarray = field(init=False)
    fc: np.ndarray = field(init=False)
    ia: np.ndarray = field(init=False)
    vs: np.ndarray = field(init=False)

    def __post_init__(self):
        self.fv, self.fc, self.ia, self.vs = (np.array(v, float) for v in (self.spec.fv, self.spec.fc, self.spec.ia, self.spec.vs))

    @property
    def n(self) -> int:
        """Number of joints."""
        return self.description.n

    @property
    def joint_names(self) -> list[str]:
        """MuJoCo's joint names in its dof order."""
        return [self.model.joint(i).name for i in range(self.model.njnt)]

    def true_friction(self) -> dict[str, np.ndarray]:
        """{"fv", "fc", "ia"}: (n,) plant values (fc: the dry-friction level, reached at |q'| = vs)."""
        return {"fv": self.fv.copy(), "fc": self.fc.copy(), "ia": self.ia.copy()}

    def dry_friction(self, dq) -> np.ndarray:
        """The plant's dry friction at steady speed (N, n) N m, opposing motion when subtracted:
        fc clip(q' / vs, -1, 1) (see :func:`_soften_dry_friction`); dq (N, n) rad/s."""
        return self.fc * np.clip(np.asarray(dq) / self.vs, -1.0, 1.0)

    def true_parameters(self, terms="fv,fc,ia") -> np.ndarray:
        """The plant's full parameter vector (p,) in ``description.param_names(terms)`` order."""
        values = dict(zip(self.truth.inertial_names(), self.truth.prior.reshape(-1)))
        jp = self.true_friction()
        for i, j in enumerate(self.truth.joint_names):
            for code in ident.parse_terms(terms):
                values[f"{j}.{code}"] = jp[code][i] if code in jp else 0.0
        return np.array([values[name] for name in self.description.param_names(terms)])

    def inverse_dynamics(self, q, dq, ddq, friction: bool = False) -> np.ndarray:
        """MuJoCo's inverse dynamics (N, n) at (N, n) states: M(q) q'' + c + g + ia q'' [+ fv q'].

        With ``friction`` false the viscous and dry friction are switched off (dry friction has no
        inverse as a function of the state alone).
        """
        m = copy.deepcopy(self.model)
        if not friction:
            m.dof_damping[:] = 0.0
        m.dof_frictionloss[:] = 0.0
        d = mujoco.MjData(m)
        out = np.empty((len(q), self.n))
        for k in range(len(q)):
            d.qpos[:], d.qvel[:], d.qacc[:] = q[k], dq[k], ddq[k]
            mujoco.mj_inverse(m, d)
            out[k] = d.qfrc_inverse
        return out

    def run(self, t, q_ref, dq_ref, ddq_ref, noise: float = TORQUE_NOISE, seed: int = 0, settle: float = 1.0,
            bandwidth: float = 5.0, damping: float = 0.9, velocity_cutoff: float = 50.0, model=None) -> Log:
        """Track a reference in closed loop and log it at the control rate.

        t (K,) s uniformly at 1 / RATE; references (K, n) rad, rad/s, rad/s^2. The arm first holds
        ``q_ref[0]`` for `settle` s (not logged), as a real arm holds its pose before a log starts.
        PD gains come from the description's joint inertia at the first pose plus the rotor inertia
        (a datasheet value), for a `bandwidth` Hz loop with `damping` ratio.
        """
        m = self.model if model is None else model
        n = self.n
        T = 1.0 / RATE
        q_ref, dq_ref, ddq_ref = (np.ascontiguousarray(a, dtype=float) for a in (q_ref, dq_ref, ddq_ref))
        tau_ff = ident.inverse_dynamics(self.description, q_ref, dq_ref, ddq_ref)
        Mii = np.diagonal(ident.mass_matrix(self.description, q_ref[:1])[0]) + self.ia
        w = 2 * np.pi * bandwidth
        kp, kd = Mii * w**2, 2 * damping * w * Mii
        alpha = np.exp(-2 * np.pi * velocity_cutoff * T)
        res = 2 * np.pi / ENCODER_COUNTS
        res_c = 2 * np.pi / CONTROL_COUNTS
        limit = self.description.effort_limit
        d = mujoco.MjData(m)
        d.qpos[:] = q_ref[0]
        d.qvel[:] = 0.0
        mujoco.mj_forward(m, d)
        n_settle = int(round(settle * RATE))
        K = q_ref.shape[0]
        q_log, tau_log, qt, dqt, fr = (np.empty((K, n)) for _ in range(5))
        enc_prev = np.round(d.qpos / res_c) * res_c
        v_est = np.zeros(n)
        sat = 0
        for k in range(-n_settle, K):
            kk = max(k, 0)
            enc = np.round(d.qpos / res_c) * res_c
            v_est = alpha * v_est + (1 - alpha) * (enc - enc_prev) / T
            enc_prev = enc
            if k < 0:
                u = tau_ff[0] + kp * (q_ref[0] - enc) - kd * v_est
            else:
                u = tau_ff[kk] + kp * (q_ref[kk] - enc) + kd * (dq_ref[kk] - v_est)
            over = np.abs(u) > limit
            if over.any():
                sat += int(over.sum())
                u = np.clip(u, -limit, limit)
            if k >= 0:
                q_log[k] = np.round(d.qpos / res) * res
                tau_log[k] = u
                qt[k] = d.qpos
                dqt[k] = d.qvel
                fr[k] = d.qfrc_constraint  # only dry friction: contacts and limits are off
            d.qfrc_applied[:] = u
            mujoco.mj_step(m, d, nstep=SUBSTEPS)
            if not np.all(np.isfinite(d.qpos)):
                raise RuntimeError(f"MuJoCo plant diverged at t = {k * T:.3f} s")
        rng = np.random.default_rng(seed)
        tau_noisy = tau_log + rng.normal(0.0, noise, tau_log.shape)
        return Log(self.joint_names, np.asarray(t, float) - t[0], q_log, tau_noisy, tau_log, qt, dqt, fr, q_ref, noise, sat)


def build_plant(key: str, seed: int = 0, as_built: bool = True, designed_friction: bool = True) -> Plant:
    """The MuJoCo plant of arm `key` ("ur5" or "panda"); `seed` picks the as-built deviations
    (none without `as_built`).

    Checks that MuJoCo's joints are ident's movable joints in the same order, that gravity is
    -9.81 m/s^2 along z, and switches contacts and joint limits off. With `designed_friction`
    (the default) the dry friction follows fc clip(q' / vs, -1, 1) at steady speed (see
    :func:`_soften_dry_friction`); without, MuJoCo's default softness is kept (for comparison).
    """
    spec = ARMS[key]
    path = erd_path(spec.urdf)
    description = ident.load_robot(path, locked=spec.locked)
    changes = as_built_changes(path, spec.locked, spec.changed_links, seed) if as_built else {}
    text = plant_urdf(path, spec.locked, changes)
    with tempfile.TemporaryDirectory() as tmp:
        p = Path(tmp) / f"{key}_plant.urdf"
        p.write_text(text)
        truth = ident.load_robot(p)
    model = mujoco.MjModel.from_xml_string(text)
    names = [model.joint(i).name for i in range(model.njnt)]
    if names != list(description.joint_names) or names != list(truth.joint_names) or model.nv != description.n:
        raise RuntimeError(f"MuJoCo joints {names} are not ident's {description.joint_names}")
    if not np.allclose(model.opt.gravity, [0.0, 0.0, -9.81]):
        raise RuntimeError(f"MuJoCo gravity {model.opt.gravity} is not (0, 0, -9.81)")
    model.opt.disableflags |= int(mujoco.mjtDisableBit.mjDSBL_CONTACT) | int(mujoco.mjtDisableBit.mjDSBL_LIMIT)
    model.opt.timestep = 1.0 / (RATE * SUBSTEPS)
    model.opt.integrator = int(mujoco.mjtIntegrator.mjINT_IMPLICITFAST)
    model.dof_armature[:] = spec.ia
    model.dof_damping[:] = spec.fv
    model.dof_frictionloss[:] = spec.fc
    if designed_friction:
        _soften_dry_friction(model, spec)
    return Plant(spec, description, truth, model, changes, text)


def _soften_dry_friction(model, spec: ArmSpec) -> None:
    """Give MuJoCo's dry friction a known curve: f = fc clip(q' / vs, -1, 1) at steady speed.

    MuJoCo's documented soft-constraint model (documentation, "Computation"): the friction force
    is f = -(a0 - aref) / (A + R), clamped to +-frictionloss, with a0 the joint's acceleration
    without it, A its inverse inertia, aref = -b q', b = 2 / (dmax timeconst) (solref) and
    R = (1 - d) / d w0 (solimp d, w0 = ``dof_invweight0``). A joint at steady speed (zero
    acceleration) thus feels f = -(b / R) q' until the level fc: a linear ramp of slope b / R.
    With MuJoCo's defaults that slope is 947 / w0, w0 taken at qpos0 = 0 before the armature is
    set: the ramp would end anywhere between 1 and 80 mrad/s depending on the joint. Here w0 is
    recomputed at home with the armature (``mj_setConst``), b is chosen for a ramp ending at `vs`,
    and d = :data:`FRICTION_IMPEDANCE` keeps the part of the net torque the unsaturated
    constraint absorbs while the joint accelerates, A / (A + R) = d (about), small.
    """
    # mj_setConst evaluates w0 at qpos0; qpos0 is also the zero of every hinge angle, so put it
    # back to the description's zero afterwards
    qpos0 = model.qpos0.copy()
    model.qpos0[:] = spec.home
    mujoco.mj_setConst(model, mujoco.MjData(model))
    model.qpos0[:] = qpos0
    d = FRICTION_IMPEDANCE
    R = (1.0 - d) / d * model.dof_invweight0
    b = np.asarray(spec.fc) / np.asarray(spec.vs) * R
    timeconst = 2.0 / (d * b)
    if np.any(timeconst < 2.0 * model.opt.timestep):  # MuJoCo would silently stiffen it
        raise RuntimeError(f"dry-friction time constants {timeconst} below two physics steps")
    model.dof_solref[:, 0] = timeconst
    model.dof_solref[:, 1] = 1.0
    model.dof_solimp[:, 0] = d
    model.dof_solimp[:, 1] = d


# --------------------------------------------------------------------------------------------
# Reference trajectories
# --------------------------------------------------------------------------------------------
def excitation(robot: ident.Robot, home, period: float = 10.0, harmonics: int = 5, seed: int = 0,
               max_velocity: float = 1.3, max_excursion: float = 1.5, margin: float = 0.25) -> ident.FourierTrajectory:
    """A random finite Fourier trajectory (Swevers et al. 1997 family) that starts and ends each
    period at rest at `home` (q' = q'' = 0) and keeps `margin` rad inside the joint limits.

    Per joint the coefficients are standard normal (every harmonic alike, for many velocity
    reversals), projected on the rest
    conditions sum_l a_l = 0 and sum_l l b_l = 0, then scaled so that the peak speed is at most
    `max_velocity` rad/s and the excursion from home at most `max_excursion` rad (and the limits).
    """
    rng = np.random.default_rng(seed)
    n, L = robot.n, harmonics
    home = np.asarray(home, float)
    tt = np.linspace(0.0, period, 4001)
    wl = 2 * np.pi / period * np.arange(1, L + 1)
    arg = tt[:, None] * wl
    # basis of q and q' for coefficient rows [q0, a_1..a_L, b_1..b_L] (FourierTrajectory's layout)
    phi = np.hstack([np.ones((tt.size, 1)), np.sin(arg) / wl, -np.cos(arg) / wl])
    dphi = np.hstack([np.zeros((tt.size, 1)), np.cos(arg), np.sin(arg)])
    # rest conditions on [a_1..a_L, b_1..b_L]: q'(0) = sum a_l, q''(0) = w sum l b_l
    C = np.zeros((2, 2 * L))
    C[0, :L] = 1.0
    C[1, L:] = np.arange(1, L + 1)
    _, _, Vt = np.linalg.svd(C)
    null = Vt[2:].T
    X = np.zeros((n, 2 * L + 1))
    for i in range(n):
        ab = rng.normal(size=2 * L)
        ab = null @ (null.T @ ab)
        x = np.concatenate([[0.0], ab])
        x[0] = -(phi[0] @ x)  # q(0) = 0 before the offset to home
        qi, dqi = phi @ x, dphi @ x
        lo = max(robot.lower[i] + margin - home[i], -max_excursion) if np.isfinite(robot.lower[i]) else -max_excursion
        hi = min(robot.upper[i] - margin - home[i], max_excursion) if np.isfinite(robot.upper[i]) else max_excursion
        s = max_velocity / np.abs(dqi).max()
        if qi.max() > 0:
            s = min(s, hi / qi.max())
        if qi.min() < 0:
            s = min(s, lo / qi.min())
        X[i] = s * x
        X[i, 0] += home[i]
    return ident.FourierTrajectory.from_coefficients(robot.joint_names, period, X, home)


def simulate_log(plant: Plant, traj: ident.FourierTrajectory, periods: int, seed: int, noise: float = TORQUE_NOISE) -> Log:
    """Run `periods` periods of `traj` on the plant at 1 kHz (t = 0 .. periods * period inclusive)."""
    t, q, dq, ddq = traj.sample(RATE, periods)
    return plant.run(t, q, dq, ddq, noise=noise, seed=seed)


#: The excitation every scenario uses: what a user tells ident (period s, harmonics).
PERIOD = 10.0
HARMONICS = 5
ID_PERIODS = 3
HELD_OUT_PERIODS = 2


@dataclass
class Scenario:
    """An identification log (``ID_PERIODS`` periods) and a held-out log on a different trajectory
    (``HELD_OUT_PERIODS`` periods), simulated on one plant and written as CSV."""

    plant: Plant
    id_log: Log
    held_out_log: Log
    id_csv: Path
    held_out_csv: Path

    @property
    def options(self) -> dict:
        """The excitation facts a user passes to ``ident.load_dataset``."""
        return {"period": PERIOD, "harmonics": HARMONICS}


def scenario(key: str, folder, seed: int = 0) -> Scenario:
    """Build the plant of arm `key`, simulate both logs and write them into `folder` (seeded)."""
    plant = build_plant(key, seed=seed)
    rob = plant.description
    traj_id = excitation(rob, plant.spec.home, PERIOD, HARMONICS, seed=1000 + seed, margin=plant.spec.margin)
    traj_ho = excitation(rob, plant.spec.home, PERIOD, HARMONICS, seed=2000 + seed, margin=plant.spec.margin)
    id_log = simulate_log(plant, traj_id, ID_PERIODS, seed=3000 + seed)
    ho_log = simulate_log(plant, traj_ho, HELD_OUT_PERIODS, seed=4000 + seed)
    for log in (id_log, ho_log):
        if log.saturated:
            raise RuntimeError(f"{key}: the controller saturated {log.saturated} times; lower the excitation")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    return Scenario(plant, id_log, ho_log, id_log.write_csv(folder / f"{key}_identification.csv"),
                    ho_log.write_csv(folder / f"{key}_held_out.csv"))


# --------------------------------------------------------------------------------------------
# Dry friction against speed
# --------------------------------------------------------------------------------------------
def friction_ramp(plant: Plant, joint: int, duration: float = 10.0, peak: float = 1.2, hold: float = 2.0):
    """Measure MuJoCo's dry-friction force on one joint against its speed by a slow torque ramp.

    Open loop, gravity and viscous friction off, the other joints held (their rotor inertia raised
    a million-fold): the torque on `joint` rises linearly from 0 to `peak` x fc over `duration` s,
    then stays there for `hold` s. Returns the joint speed (K,) rad/s, the dry-friction force
    (K,) N m (``qfrc_constraint``), the applied torque (K,) N m, and the joint's inverse inertia
    (M^-1)_jj, 1/(kg m^2), that MuJoCo's soft constraint scales with.
    """
    m = copy.deepcopy(plant.model)
    m.opt.gravity[:] = 0.0
    m.dof_damping[:] = 0.0
    others = np.arange(plant.n) != joint
    m.dof_armature[others] += 1e6 * (1.0 + m.dof_armature[others])
    d = mujoco.MjData(m)
    d.qpos[:] = plant.spec.home
    mujoco.mj_forward(m, d)
    M = np.zeros((m.nv, m.nv))
    mujoco.mj_fullM(m, d, M)
    minv = float(np.linalg.inv(M)[joint, joint])
    K = int(round((duration + hold) * RATE))
    v, f, tau = np.empty(K), np.empty(K), np.empty(K)
    for k in range(K):
        u = plant.fc[joint] * peak * min(k / (duration * RATE), 1.0)
        v[k], f[k], tau[k] = d.qvel[joint], d.qfrc_constraint[joint], u
        d.qfrc_applied[:] = 0.0
        d.qfrc_applied[joint] = u
        mujoco.mj_step(m, d, nstep=SUBSTEPS)
    return v, f, tau, minv


def soft_friction_slope(plant: Plant, joint: int, minv: float) -> float:
    """Creep slope |f| / |q'| (N m s/rad) that MuJoCo's soft dry-friction constraint should show
    below saturation, from its documented model (MuJoCo documentation, "Computation": the
    constraint force is f = -(a0 - aref) / (A + R), aref = -b v, b = 2 / (dmax timeconst),
    R = (1 - d) / d A with d = dmin at zero violation): at rest under a steady torque the
    acceleration (R a0 - A b v) / (A + R) vanishes, so f = -tau and v = R tau / (A b)."""
    timeconst, _ = plant.model.dof_solref[joint]
    dmin, dmax = plant.model.dof_solimp[joint][:2]
    b = 2.0 / (dmax * timeconst)
    R_over_A = (1.0 - dmin) / dmin
    return b / (R_over_A * minv)
