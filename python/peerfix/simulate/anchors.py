"""Where the anchors are: placed by a rule from the site bounds, or given.

Rules
  perimeter      anchor_count anchors evenly spaced along the bounds, by arc
                 length, counter-clockwise from the corner (xmin, ymin).
  lattice        anchor_count anchors on an nx x ny lattice of cell centres;
                 nx * ny = anchor_count with nx / ny closest to the site's
                 aspect ratio (a prime count gives a single row).
  open-field-13  3 x 3 lattice at 10 %, 50 %, 90 % of each side, then the
                 centres of the four quadrant squares at 30 % / 70 %.
  strip-walls    along the two long walls, alternating wall, one anchor every
                 anchor_spacing_m, the first half a spacing from the end.
  explicit       the (id, x, y) list in the settings.
"""

from __future__ import annotations

import math

import numpy as np

from .presets import SimulationSettings

Bounds = tuple[float, float, float, float]


def perimeter(bounds_m: Bounds, count: int) -> np.ndarray:
    xmin, ymin, xmax, ymax = bounds_m
    w, h = xmax - xmin, ymax - ymin
    s = np.arange(count) * (2 * (w + h) / count)
    xy = np.empty((count, 2))
    for i, si in enumerate(s):
        if si < w:  # south wall, west to east
            xy[i] = (xmin + si, ymin)
        elif si < w + h:  # east wall, south to north
            xy[i] = (xmax, ymin + si - w)
        elif si < 2 * w + h:  # north wall, east to west
            xy[i] = (xmax - (si - w - h), ymax)
        else:  # west wall, north to south
            xy[i] = (xmin, ymax - (si - 2 * w - h))
    return xy


def lattice_shape(count: int, aspect: float) -> tuple[int, int]:
    """(nx, ny) with nx * ny = count and nx / ny closest to aspect (in log ratio)."""
    pairs = [(nx, count // nx) for nx in range(1, count + 1) if count % nx == 0]
    return min(pairs, key=lambda p: abs(math.log(p[0] / p[1]) - math.log(aspect)))


def lattice(bounds_m: Bounds, count: int) -> np.ndarray:
    xmin, ymin, xmax, ymax = bounds_m
    w, h = xmax - xmin, ymax - ymin
    nx, ny = lattice_shape(count, w / h)
    ix, iy = np.meshgrid(np.arange(nx), np.arange(ny))
    return np.column_stack([xmin + (ix.ravel() + 0.5) * w / nx, ymin + (iy.ravel() + 0.5) * h / ny])


def open_field_13(bounds_m: Bounds) -> np.ndarray:
    xmin, ymin, xmax, ymax = bounds_m
    w, h = xmax - xmin, ymax - ymin
    outer = [(fx, fy) for fy in (0.1, 0.5, 0.9) for fx in (0.1, 0.5, 0.9)]
    inner = [(fx, fy) for fy in (0.3, 0.7) for fx in (0.3, 0.7)]
    frac = np.array(outer + inner)
    return np.column_stack([xmin + frac[:, 0] * w, ymin + frac[:, 1] * h])


def strip_walls(bounds_m: Bounds, spacing_m: float) -> np.ndarray:
    xmin, ymin, xmax, ymax = bounds_m
    along_x = (xmax - xmin) >= (ymax - ymin)
    length = (xmax - xmin) if along_x else (ymax - ymin)
    count = max(1, int(math.floor(length / spacing_m + 1e-9)))
    s = (np.arange(count) + 0.5) * spacing_m
    wall = np.arange(count) % 2  # 0: first long wall, 1: the opposite one
    if along_x:
        return np.column_stack([xmin + s, np.where(wall == 0, ymin, ymax)])
    return np.column_stack([np.where(wall == 0, xmin, xmax), ymin + s])


def anchor_ids(count: int) -> list[str]:
    """anc-00, anc-01, ...: zero-padded to the width the count needs (at least 2)."""
    width = max(2, len(str(count - 1)))
    return [f"anc-{i:0{width}d}" for i in range(count)]


def place_anchors(settings: SimulationSettings) -> tuple[list[str], np.ndarray]:
    """(ids, (A, 2) positions) for the settings' anchor rule."""
    rule = settings.anchor_rule
    b = settings.bounds_m
    if rule == "explicit":
        ids = [str(a[0]) for a in settings.explicit_anchors]
        if len(set(ids)) != len(ids):
            raise ValueError("explicit anchors: ids must be unique")
        xy = np.array([[float(a[1]), float(a[2])] for a in settings.explicit_anchors])
        return ids, xy
    if rule == "perimeter":
        xy = perimeter(b, settings.anchor_count)
    elif rule == "lattice":
        xy = lattice(b, settings.anchor_count)
    elif rule == "open-field-13":
        xy = open_field_13(b)
    elif rule == "strip-walls":
        xy = strip_walls(b, settings.anchor_spacing_m)
    else:  # pragma: no cover - SimulationSettings validates the rule
        raise ValueError(f"unknown anchor rule '{rule}'")
    return anchor_ids(len(xy)), xy
