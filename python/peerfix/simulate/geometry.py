"""Plane geometry for the simulator: points and segments against rectangles.

Obstacles are axis-aligned rectangles (xmin, ymin, xmax, ymax) in metres.
All functions are vectorised over many points / segments and obstacles.
"""

from __future__ import annotations

import numpy as np


def as_rects(rects: object) -> np.ndarray:
    """(K, 4) float array of rectangles; K may be 0."""
    arr = np.asarray(rects, dtype=float).reshape(-1, 4)
    if np.any(arr[:, 2] <= arr[:, 0]) or np.any(arr[:, 3] <= arr[:, 1]):
        raise ValueError("an obstacle rectangle needs xmin < xmax and ymin < ymax")
    return arr


def points_in_rects(points_m: np.ndarray, rects: object, margin_m: float = 0.0) -> np.ndarray:
    """(N,) bool: point lies strictly inside some rectangle grown by margin_m."""
    pts = np.asarray(points_m, dtype=float).reshape(-1, 2)
    r = as_rects(rects)
    if len(r) == 0:
        return np.zeros(len(pts), dtype=bool)
    x = pts[:, 0:1]
    y = pts[:, 1:2]
    inside = (
        (x > r[:, 0] - margin_m)
        & (x < r[:, 2] + margin_m)
        & (y > r[:, 1] - margin_m)
        & (y < r[:, 3] + margin_m)
    )
    return inside.any(axis=1)


def segment_overlap_m(p0_m: np.ndarray, p1_m: np.ndarray, rects: object) -> np.ndarray:
    """(M, K) length in metres of each segment p0->p1 that lies inside each rectangle.

    Liang-Barsky clipping: the segment is p0 + t (p1 - p0), t in [0, 1]; each
    slab of the rectangle cuts an interval of t and the overlap is their
    intersection.  A segment running exactly along a face counts as outside
    (length 0), so grazing a rack face is not a blocked path.
    """
    p0 = np.asarray(p0_m, dtype=float).reshape(-1, 2)
    p1 = np.asarray(p1_m, dtype=float).reshape(-1, 2)
    r = as_rects(rects)
    if len(r) == 0 or len(p0) == 0:
        return np.zeros((len(p0), len(r)))
    d = p1 - p0
    t_enter = np.zeros((len(p0), len(r)))
    t_exit = np.ones((len(p0), len(r)))
    for axis in (0, 1):
        lo = r[:, axis][None, :]
        hi = r[:, axis + 2][None, :]
        start = p0[:, axis : axis + 1]
        step = d[:, axis : axis + 1]
        moving = step != 0.0
        with np.errstate(divide="ignore", invalid="ignore"):
            t_lo = (lo - start) / step
            t_hi = (hi - start) / step
        t_min = np.where(moving, np.minimum(t_lo, t_hi), -np.inf)
        t_max = np.where(moving, np.maximum(t_lo, t_hi), np.inf)
        # A segment parallel to this axis' faces is inside the slab or never.
        parallel_out = ~moving & ~((start > lo) & (start < hi))
        t_min = np.where(parallel_out, np.inf, t_min)
        t_max = np.where(parallel_out, -np.inf, t_max)
        t_enter = np.maximum(t_enter, t_min)
        t_exit = np.minimum(t_exit, t_max)
    length = np.linalg.norm(d, axis=1)[:, None]
    return np.clip(t_exit - t_enter, 0.0, None) * length


def segments_cross_rects(
    p0_m: np.ndarray, p1_m: np.ndarray, rects: object, min_overlap_m: float = 1e-9
) -> np.ndarray:
    """(M,) bool: segment passes through the inside of some rectangle."""
    overlap = segment_overlap_m(p0_m, p1_m, rects)
    if overlap.shape[1] == 0:
        return np.zeros(overlap.shape[0], dtype=bool)
    return (overlap > min_overlap_m).any(axis=1)


def push_out_of_rects(
    points_m: np.ndarray, rects: object, clearance_m: float, rounds: int = 4
) -> np.ndarray:
    """Move each point inside a grown rectangle to the nearest free spot on a grown side.

    Used by the grid deployment: a grid node that falls in a rack goes to the
    nearest aisle instead of being dropped, so the agent count stays as asked.
    Candidates are the point's projections onto the four grown sides of every
    rectangle holding it; the nearest one outside all rectangles wins.  When
    none is free (touching racks), the nearest candidate is taken and the
    search repeats from there.  Points still inside after `rounds` stay put;
    the caller checks.
    """
    pts = np.array(points_m, dtype=float).reshape(-1, 2)
    r = as_rects(rects)
    if len(r) == 0:
        return pts
    lo = r[:, :2] - clearance_m
    hi = r[:, 2:] + clearance_m
    grown = np.hstack([lo, hi])
    for i in np.flatnonzero(points_in_rects(pts, grown)):
        p = pts[i].copy()
        for _ in range(rounds):
            holding = np.flatnonzero(np.all((p > lo) & (p < hi), axis=1))
            if len(holding) == 0:
                break
            cands = []
            for k in holding:
                cands += [(lo[k, 0], p[1]), (hi[k, 0], p[1]), (p[0], lo[k, 1]), (p[0], hi[k, 1])]
            cands_arr = np.array(cands)
            dist = np.linalg.norm(cands_arr - p, axis=1)
            free = ~points_in_rects(cands_arr, grown)
            pick = np.flatnonzero(free)[np.argmin(dist[free])] if free.any() else int(np.argmin(dist))
            p = cands_arr[pick]
        pts[i] = p
    return pts
