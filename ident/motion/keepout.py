"""Keep-out regions for points on links: a plane to stay above, a vertical cylinder, an axis-aligned box, a sphere; signed distances.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

REGION_KINDS = ("plane", "cylinder", "box", "sphere")


@dataclass
class KeepoutPoint:
    """A point `point` (3,) m fixed in link `link`'s frame, watched by the keep-out regions."""

    name: str
    link: str
    point: np.ndarray


@dataclass
class Region:
    """A region the watched points must stay out of (or, for a plane, on the positive side of).

    kind ``plane``: ``point`` (3,), unit ``normal`` (3,); distance n.(x - point).
    kind ``cylinder``: vertical axis through ``center`` (x, y), ``radius``, height range ``z`` (2,).
    kind ``box``: axis-aligned, corners ``lower`` (3,) and ``upper`` (3,).
    kind ``sphere``: ``center`` (3,), ``radius``.
    Everything in the base frame, m. A point is fine when its signed distance is at least ``margin``.
    ``points``: names of the watched points this region applies to (None: all).
    """

    name: str
    kind: str
    margin: float
    params: dict
    points: list[str] | None = None

    def distance(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Signed distance (N,) m (positive outside) of points `x` (N, 3) m and its gradient (N, 3)."""
        P = self.params
        if self.kind == "plane":
            nrm = P["normal"]
            return (x - P["point"]) @ nrm, np.broadcast_to(nrm, x.shape).copy()
        if self.kind == "sphere":
            d = x - P["center"]
            r = np.linalg.norm(d, axis=1)
            g = d / np.maximum(r, 1e-12)[:, None]
            return r - P["radius"], g
        if self.kind == "box":
            c = 0.5 * (P["lower"] + P["upper"])
            h = 0.5 * (P["upper"] - P["lower"])
            u = x - c
            return _box_sdf(u, h)
        # vertical cylinder: a 2-D box SDF in (radial distance, height)
        rel = x[:, :2] - P["center"]
        rho = np.linalg.norm(rel, axis=1)
        zc = 0.5 * (P["z"][0] + P["z"][1])
        hz = 0.5 * (P["z"][1] - P["z"][0])
        u = np.stack([rho, x[:, 2] - zc], axis=1)
        d, g2 = _box_sdf(u, np.array([P["radius"], hz]), radial=True)
        er = rel / np.maximum(rho, 1e-12)[:, None]
        g = np.column_stack([g2[:, 0:1] * er, g2[:, 1]])
        return d, g


def _box_sdf(u: np.ndarray, h: np.ndarray, radial: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Signed distance of points u (N, k) from the centred box of half sizes h (k,), with gradient.

    With `radial`, u[:, 0] >= 0 is a radial distance (no mirror image on that axis).
    """
    au = np.abs(u)
    sgn = np.where(u >= 0, 1.0, -1.0)
    if radial:
        sgn[:, 0] = 1.0
    e = au - h
    outside = np.maximum(e, 0.0)
    d_out = np.linalg.norm(outside, axis=1)
    inner = e.max(axis=1)
    d = np.where(inner > 0, d_out, inner)
    g = np.where((inner > 0)[:, None], outside / np.maximum(d_out, 1e-12)[:, None], 0.0)
    k = e.argmax(axis=1)
    inside_rows = np.flatnonzero(inner <= 0)
    g[inside_rows, k[inside_rows]] = 1.0
    return d, g * sgn
