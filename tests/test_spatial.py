"""The 10-parameter body form: conversions, handbook inertias, pseudo-inertia and frame changes."""

from __future__ import annotations

import numpy as np
import pytest

import ident
from ident.arm.spatial import (
    check_physical,
    from_pseudo_inertia,
    from_vector,
    matrix_to_rpy,
    pseudo_inertia,
    rpy_to_matrix,
    skew,
    sym_to_matrix,
    to_vector,
    transform_params,
)


def random_rotation(rng) -> np.ndarray:
    Q, R = np.linalg.qr(rng.normal(size=(3, 3)))
    Q = Q * np.sign(np.diag(R))
    return Q if np.linalg.det(Q) > 0 else -Q


def random_body(rng):
    ev = np.sort(rng.uniform(0.01, 0.2, 3))
    ev[2] = min(ev[2], 0.95 * (ev[0] + ev[1]))
    Rr = random_rotation(rng)
    return rng.uniform(0.2, 5.0), rng.normal(0, 0.2, 3), Rr @ np.diag(ev) @ Rr.T


def point_cloud_params(masses, points) -> np.ndarray:
    """10-vector of point masses straight from the definitions: h = sum m x, I = sum m (|x|^2 E - x x^T)."""
    I = sum(m * (x @ x * np.eye(3) - np.outer(x, x)) for m, x in zip(masses, points))
    h = sum(m * x for m, x in zip(masses, points))
    return np.concatenate([[sum(masses)], h, I[[0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]]])


def test_round_trip_vector_form():
    rng = np.random.default_rng(0)
    for _ in range(50):
        m, c, I = random_body(rng)
        m2, c2, I2 = from_vector(to_vector(m, c, I))
        assert m2 == pytest.approx(m, rel=1e-15)
        np.testing.assert_allclose(c2, c, atol=1e-14)
        np.testing.assert_allclose(I2, I, atol=1e-14)
    with pytest.raises(ident.IdentError, match="mass is not positive"):
        from_vector(np.zeros(10))


def test_solid_box_about_a_corner():
    # Handbook: a solid box (sides a, b, c) has I_C = m/12 diag(b^2+c^2, a^2+c^2, a^2+b^2);
    # about a corner, with the box in the positive octant, I_xx = m/3 (b^2+c^2) and the tensor's
    # product entries are -m a b / 4, -m a c / 4, -m b c / 4.
    m, a, b, c = 3.0, 0.4, 0.2, 0.1
    I_c = m / 12 * np.diag([b**2 + c**2, a**2 + c**2, a**2 + b**2])
    pi = to_vector(m, [a / 2, b / 2, c / 2], I_c)
    expected = [m, m * a / 2, m * b / 2, m * c / 2,
                m / 3 * (b**2 + c**2), -m * a * b / 4, -m * a * c / 4,
                m / 3 * (a**2 + c**2), -m * b * c / 4, m / 3 * (a**2 + b**2)]
    np.testing.assert_allclose(pi, expected, rtol=1e-14)


def test_rod_about_its_end_and_frame_change():
    # Handbook: a thin rod of length L about a perpendicular axis through its centre m L^2 / 12,
    # through its end m L^2 / 3.
    m, L = 2.0, 0.6
    pi_end = to_vector(m, [0.0, 0.0, L / 2], np.diag([m * L**2 / 12, m * L**2 / 12, 0.0]))
    assert pi_end[4] == pytest.approx(m * L**2 / 3, rel=1e-14)
    assert pi_end[7] == pytest.approx(m * L**2 / 3, rel=1e-14)
    # Seen from a frame at the far end with z pointing back along the rod (a half turn about x;
    # Rx(pi) is its own inverse, so (R, p) is also the pose of the first frame in the new one),
    # the rod again runs from 0 to L along z: the 10-vector must be unchanged.
    R = rpy_to_matrix([np.pi, 0.0, 0.0])
    pi_far = transform_params(pi_end, R, np.array([0.0, 0.0, L]))
    np.testing.assert_allclose(pi_far, pi_end, atol=1e-15)
    # a quarter turn about z swaps the x and y moments of a box (handbook values as above)
    m, a, b, c = 1.5, 0.3, 0.1, 0.2
    box = to_vector(m, np.zeros(3), m / 12 * np.diag([b**2 + c**2, a**2 + c**2, a**2 + b**2]))
    turned = transform_params(box, rpy_to_matrix([0.0, 0.0, np.pi / 2]), np.zeros(3))
    np.testing.assert_allclose(turned[[4, 7, 9]], box[[7, 4, 9]], atol=1e-15)


def test_transform_params_matches_point_masses():
    # Moving the frame must give what the definitions give for the moved points.
    rng = np.random.default_rng(1)
    masses = rng.uniform(0.1, 1.0, 6)
    pts = rng.normal(0, 0.3, (6, 3))
    R = random_rotation(rng)
    p = rng.normal(0, 0.5, 3)
    pi_b = point_cloud_params(masses, pts)
    pi_a = transform_params(pi_b, R, p)
    np.testing.assert_allclose(pi_a, point_cloud_params(masses, pts @ R.T + p), atol=1e-13)


def test_pseudo_inertia_is_second_moment_and_psd_iff_physical():
    # Wensing, Kim, Slotine (2017): J = sum m [x; 1][x; 1]^T for a mass distribution, and a
    # 10-vector is realizable by a positive distribution iff J is positive (semi)definite.
    rng = np.random.default_rng(2)
    masses = rng.uniform(0.1, 1.0, 8)
    pts = rng.normal(0, 0.3, (8, 3))
    J = pseudo_inertia(point_cloud_params(masses, pts))
    expected = sum(m * np.outer(np.append(x, 1), np.append(x, 1)) for m, x in zip(masses, pts))
    np.testing.assert_allclose(J, expected, atol=1e-14)
    np.testing.assert_allclose(from_pseudo_inertia(J), point_cloud_params(masses, pts), atol=1e-14)
    for _ in range(200):
        m, c, I = random_body(rng)
        pi = to_vector(m, c, I)
        assert np.linalg.eigvalsh(pseudo_inertia(pi)).min() > 0
        check_physical(pi, "body")
        # break the triangle inequality of the principal moments: no mass distribution has it
        ev, V = np.linalg.eigh(I)
        bad = to_vector(m, c, V @ np.diag([ev[0], ev[1], 1.2 * (ev[0] + ev[1])]) @ V.T)
        assert np.linalg.eigvalsh(pseudo_inertia(bad)).min() < 0
        with pytest.raises(ident.IdentError, match="triangle inequality|not positive definite"):
            check_physical(bad, "body")
    with pytest.raises(ident.IdentError, match="link3: mass -1 kg is not positive"):
        check_physical(np.array([-1.0, 0, 0, 0, 1, 0, 0, 1, 0, 1]), "link3")


def test_rotations():
    rng = np.random.default_rng(3)
    for _ in range(20):
        rpy = rng.uniform([-np.pi, -np.pi / 2, -np.pi], [np.pi, np.pi / 2, np.pi])
        R = rpy_to_matrix(rpy)
        np.testing.assert_allclose(R @ R.T, np.eye(3), atol=1e-15)
        np.testing.assert_allclose(matrix_to_rpy(R), rpy, atol=1e-12)
        u, v = rng.normal(size=3), rng.normal(size=3)
        np.testing.assert_allclose(skew(u) @ v, np.cross(u, v), atol=1e-15)
    # URDF rpy are fixed-axis x, y, z: R = Rz(yaw) Ry(pitch) Rx(roll) (URDF specification)
    r, p, y = 0.3, -0.5, 1.1
    Rx = np.array([[1, 0, 0], [0, np.cos(r), -np.sin(r)], [0, np.sin(r), np.cos(r)]])
    Ry = np.array([[np.cos(p), 0, np.sin(p)], [0, 1, 0], [-np.sin(p), 0, np.cos(p)]])
    Rz = np.array([[np.cos(y), -np.sin(y), 0], [np.sin(y), np.cos(y), 0], [0, 0, 1]])
    np.testing.assert_allclose(rpy_to_matrix([r, p, y]), Rz @ Ry @ Rx, atol=1e-15)
    np.testing.assert_allclose(sym_to_matrix([1, 2, 3, 4, 5, 6]), [[1, 2, 3], [2, 4, 5], [3, 5, 6]])
