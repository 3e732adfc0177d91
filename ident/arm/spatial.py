"""Rotations, rigid transforms and the 10-parameter form of a rigid body's inertia.

Conventions (shared by the whole package):

* A body's inertial parameters are the 10-vector ``[m, mx, my, mz, xx, xy, xz, yy, yz, zz]`` in
  the body's own frame: mass (kg), first moment ``h = m c`` (kg m) and the inertia tensor about the
  **frame origin** (kg m^2).
* ``R`` maps vectors from a child frame to its parent; ``p`` is the child origin in the parent.
* All functions accept leading batch dimensions ``(...)`` unless stated otherwise.
"""

from __future__ import annotations

import numpy as np

from ..errors import IdentError

PARAM_SUFFIXES = ("m", "mx", "my", "mz", "xx", "xy", "xz", "yy", "yz", "zz")

_SYM_INDEX = ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))


def skew(v: np.ndarray) -> np.ndarray:
    """Cross-product matrix: ``skew(v) @ u == cross(v, u)``. v (..., 3) -> (..., 3, 3)."""
    v = np.asarray(v, dtype=float)
    out = np.zeros(v.shape[:-1] + (3, 3))
    out[..., 0, 1], out[..., 0, 2] = -v[..., 2], v[..., 1]
    out[..., 1, 0], out[..., 1, 2] = v[..., 2], -v[..., 0]
    out[..., 2, 0], out[..., 2, 1] = -v[..., 1], v[..., 0]
    return out


def rpy_to_matrix(rpy: np.ndarray) -> np.ndarray:
    """URDF roll-pitch-yaw (fixed axes x, y, z) to a rotation matrix: R = Rz(yaw) Ry(pitch) Rx(roll)."""
    r, p, y = np.asarray(rpy, dtype=float)
    cr, sr, cp, sp, cy, sy = np.cos(r), np.sin(r), np.cos(p), np.sin(p), np.cos(y), np.sin(y)
    return np.array(
        [
            [cy * cp, cy * sp * sr - sy * cr, cy * sp * cr + sy * sr],
            [sy * cp, sy * sp * sr + cy * cr, sy * sp * cr - cy * sr],
            [-sp, cp * sr, cp * cr],
        ]
    )


def matrix_to_rpy(R: np.ndarray) -> np.ndarray:
    """Inverse of :func:`rpy_to_matrix` (pitch in [-pi/2, pi/2]); (3, 3) -> (3,) rad."""
    R = np.asarray(R, dtype=float)
    pitch = np.arctan2(-R[2, 0], np.hypot(R[0, 0], R[1, 0]))
    if abs(np.cos(pitch)) < 1e-10:  # gimbal lock: put all of the rotation about z into yaw
        return np.array([0.0, pitch, np.arctan2(-R[0, 1], R[1, 1])])
    return np.array([np.arctan2(R[2, 1], R[2, 2]), pitch, np.arctan2(R[1, 0], R[0, 0])])


def axis_angle(axis: np.ndarray, angle: float) -> np.ndarray:
    """Rotation by `angle` (rad) about unit `axis` (3,) (Rodrigues' formula) -> (3, 3)."""
    k = skew(axis)
    return np.eye(3) + np.sin(angle) * k + (1.0 - np.cos(angle)) * (k @ k)


def sym_to_matrix(v6: np.ndarray) -> np.ndarray:
    """Inertia entries ``[xx, xy, xz, yy, yz, zz]`` (..., 6) -> symmetric (..., 3, 3)."""
    v6 = np.asarray(v6, dtype=float)
    out = np.empty(v6.shape[:-1] + (3, 3))
    for k, (i, j) in enumerate(_SYM_INDEX):
        out[..., i, j] = v6[..., k]
        out[..., j, i] = v6[..., k]
    return out


def matrix_to_sym(I: np.ndarray) -> np.ndarray:
    """Symmetric (..., 3, 3) -> ``[xx, xy, xz, yy, yz, zz]`` (..., 6)."""
    I = np.asarray(I, dtype=float)
    return np.stack([I[..., i, j] for i, j in _SYM_INDEX], axis=-1)


def inertia_at_origin(mass, com, inertia_com) -> np.ndarray:
    """Parallel-axis theorem: I_O = I_C + m (|c|^2 E3 - c c^T). Shapes (...), (..., 3), (..., 3, 3)."""
    m = np.asarray(mass, dtype=float)[..., None, None]
    c = np.asarray(com, dtype=float)
    cc = np.einsum("...i,...j->...ij", c, c)
    return np.asarray(inertia_com, dtype=float) + m * (np.einsum("...i,...i->...", c, c)[..., None, None] * np.eye(3) - cc)


def to_vector(mass, com, inertia_com) -> np.ndarray:
    """Per-link (mass kg, COM (..., 3) m, inertia about the COM (..., 3, 3) kg m^2) -> 10-vector (..., 10)."""
    m = np.asarray(mass, dtype=float)
    c = np.asarray(com, dtype=float)
    I_o = inertia_at_origin(m, c, inertia_com)
    return np.concatenate([m[..., None], m[..., None] * c, matrix_to_sym(I_o)], axis=-1)


def from_vector(pi: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """10-vector (..., 10) -> (mass (...), COM (..., 3), inertia about the COM (..., 3, 3)).

    Raises :class:`IdentError` where a mass is not positive (the COM is undefined).
    """
    pi = np.asarray(pi, dtype=float)
    m = pi[..., 0]
    if np.any(~(m > 0)):
        raise IdentError("cannot convert to mass/COM/inertia form: a mass is not positive")
    c = pi[..., 1:4] / m[..., None]
    I_c = inertia_at_origin(-m, c, sym_to_matrix(pi[..., 4:10]))  # I_C = I_O - m(|c|^2 E - c c^T)
    return m, c, I_c


def pseudo_inertia(pi: np.ndarray) -> np.ndarray:
    """4x4 pseudo-inertia J = [[S, h], [h^T, m]], S = tr(I_O)/2 E3 - I_O (Wensing, Kim, Slotine 2017).

    The parameters are realizable by a non-negative mass distribution iff J is positive semidefinite.
    pi (..., 10) -> (..., 4, 4).
    """
    pi = np.asarray(pi, dtype=float)
    I_o = sym_to_matrix(pi[..., 4:10])
    tr = np.trace(I_o, axis1=-2, axis2=-1)
    J = np.empty(pi.shape[:-1] + (4, 4))
    J[..., :3, :3] = 0.5 * tr[..., None, None] * np.eye(3) - I_o
    J[..., :3, 3] = pi[..., 1:4]
    J[..., 3, :3] = pi[..., 1:4]
    J[..., 3, 3] = pi[..., 0]
    return J


def from_pseudo_inertia(J: np.ndarray) -> np.ndarray:
    """Inverse of :func:`pseudo_inertia`: (..., 4, 4) -> (..., 10). I_O = tr(S) E3 - S."""
    J = np.asarray(J, dtype=float)
    S = J[..., :3, :3]
    I_o = np.trace(S, axis1=-2, axis2=-1)[..., None, None] * np.eye(3) - S
    return np.concatenate([J[..., 3, 3][..., None], J[..., :3, 3], matrix_to_sym(I_o)], axis=-1)


def transform_params(pi: np.ndarray, R: np.ndarray, p: np.ndarray) -> np.ndarray:
    """Express a body's 10-vector in another frame.

    `pi` (10,) is given in frame B; frame B has orientation `R` (3, 3) and origin `p` (3,) in frame A.
    Returns the same body's 10-vector in frame A (used to merge bodies joined by fixed joints).
    I_A = R I_B R^T - [p]x[Rh]x - [Rh]x[p]x - m [p]x[p]x.
    """
    pi = np.asarray(pi, dtype=float)
    m = pi[0]
    h = R @ pi[1:4]
    I_b = sym_to_matrix(pi[4:10])
    P, H = skew(p), skew(h)
    I_a = R @ I_b @ R.T - P @ H - H @ P - m * (P @ P)
    return np.concatenate([[m], h + m * np.asarray(p, dtype=float), matrix_to_sym(I_a)])


def check_physical(pi: np.ndarray, where: str, tol: float = 1e-12) -> None:
    """Raise :class:`IdentError` naming `where` unless `pi` (10,) is a physically realizable body.

    Checks: mass > 0 and the inertia about the COM positive definite with the triangle inequalities
    of its principal moments (equivalently, the pseudo-inertia is positive definite).
    """
    pi = np.asarray(pi, dtype=float)
    if not np.all(np.isfinite(pi)):
        raise IdentError(f"{where}: inertial parameters are not finite")
    if not pi[0] > 0:
        raise IdentError(f"{where}: mass {pi[0]:g} kg is not positive")
    _, _, I_c = from_vector(pi)
    ev = np.linalg.eigvalsh(I_c)
    scale = max(abs(ev).max(), 1e-300)
    if ev.min() <= tol * scale:
        raise IdentError(f"{where}: inertia about the COM is not positive definite (eigenvalues {ev.round(12).tolist()})")
    s = ev.sum()
    if np.any(2 * ev > s * (1 + 1e-9)):
        raise IdentError(f"{where}: principal moments {ev.round(12).tolist()} violate the triangle inequality")
