"""Where the agents stand: uniform, jittered grid, or a long narrow strip.

Every deployment keeps agents out of obstacles (racks) when the site has
any: random deployments redraw a point that lands in an obstacle (rejection
sampling, so the result is uniform over the free space); the grid pushes a
node that lands in an obstacle to the nearest free side.
"""

from __future__ import annotations

import math

import numpy as np

from .geometry import points_in_rects, push_out_of_rects
from .presets import SimulationSettings

Region = tuple[float, float, float, float]

# Rejection sampling gives up after this many rounds: the free space is then
# too small a share of the region to be a sensible site.
_MAX_ROUNDS = 200


def uniform(
    rng: np.random.Generator,
    n: int,
    region_m: Region,
    obstacles_m: object = (),
    clearance_m: float = 0.0,
) -> np.ndarray:
    """(n, 2) points uniform over the free part of region_m."""
    xmin, ymin, xmax, ymax = region_m
    kept: list[np.ndarray] = []
    have = 0
    for _ in range(_MAX_ROUNDS):
        batch = rng.uniform((xmin, ymin), (xmax, ymax), size=(max(2 * (n - have), 16), 2))
        batch = batch[~points_in_rects(batch, obstacles_m, clearance_m)]
        kept.append(batch)
        have += len(batch)
        if have >= n:
            return np.concatenate(kept)[:n]
    raise ValueError(f"could not place {n} agents in the free space of {region_m}: obstacles cover almost all of it")


def grid_nodes(n: int, region_m: Region) -> np.ndarray:
    """(n, 2) nominal grid: cell centres of an nx x ny grid shaped like the region.

    nx / ny follows the region's aspect ratio; nodes are taken row by row from
    the bottom, so a count that is not nx * ny leaves the top row part-filled.
    """
    xmin, ymin, xmax, ymax = region_m
    width, height = xmax - xmin, ymax - ymin
    nx = max(1, min(n, round(math.sqrt(n * width / height))))
    ny = math.ceil(n / nx)
    ix, iy = np.meshgrid(np.arange(nx), np.arange(ny))
    x = xmin + (ix.ravel() + 0.5) * width / nx
    y = ymin + (iy.ravel() + 0.5) * height / ny
    return np.column_stack([x, y])[:n]


def grid(
    rng: np.random.Generator,
    n: int,
    region_m: Region,
    jitter_m: float,
    obstacles_m: object = (),
    clearance_m: float = 0.0,
) -> np.ndarray:
    """(n, 2) grid nodes plus Gaussian jitter (std jitter_m per axis), clipped to the region."""
    xmin, ymin, xmax, ymax = region_m
    pts = grid_nodes(n, region_m) + rng.normal(0.0, 1.0, size=(n, 2)) * jitter_m
    pts = np.clip(pts, (xmin, ymin), (xmax, ymax))
    pts = np.clip(push_out_of_rects(pts, obstacles_m, clearance_m), (xmin, ymin), (xmax, ymax))
    if points_in_rects(pts, obstacles_m, clearance_m).any():
        raise ValueError("grid deployment: a node stays inside an obstacle after moving it; use 'uniform'")
    return pts


def strip_region(bounds_m: Region, length_m: float = 0.0, width_m: float = 0.0) -> Region:
    """Rectangle of the strip: centred in the bounds, long side along the bounds' long side.

    length_m / width_m of 0 mean the full long / short side of the bounds.
    """
    xmin, ymin, xmax, ymax = bounds_m
    along_x = (xmax - xmin) >= (ymax - ymin)
    long_side = (xmax - xmin) if along_x else (ymax - ymin)
    short_side = (ymax - ymin) if along_x else (xmax - xmin)
    length = length_m or long_side
    width = width_m or short_side
    if length > long_side + 1e-9 or width > short_side + 1e-9:
        raise ValueError(f"strip {length} m x {width} m does not fit in the bounds {bounds_m}")
    cx, cy = (xmin + xmax) / 2, (ymin + ymax) / 2
    half_x, half_y = (length / 2, width / 2) if along_x else (width / 2, length / 2)
    return (cx - half_x, cy - half_y, cx + half_x, cy + half_y)


def deployment_region(settings: SimulationSettings) -> Region:
    """Rectangle the agents are drawn in: the strip, or the bounds less the wall margin."""
    if settings.deployment == "strip":
        region = strip_region(settings.bounds_m, settings.strip_length_m, settings.strip_width_m)
    else:
        region = settings.bounds_m
    m = settings.agent_margin_m
    xmin, ymin, xmax, ymax = region
    # The margin only shrinks the region where it touches the site walls.
    bxmin, bymin, bxmax, bymax = settings.bounds_m
    out = (max(xmin, bxmin + m), max(ymin, bymin + m), min(xmax, bxmax - m), min(ymax, bymax - m))
    if out[2] <= out[0] or out[3] <= out[1]:
        raise ValueError(f"agent_margin_m = {m} leaves no room to place agents")
    return out


def deploy(settings: SimulationSettings, rng: np.random.Generator) -> np.ndarray:
    """(agents, 2) true agent positions for these settings."""
    region = deployment_region(settings)
    obstacles = settings.obstacles_m
    clearance = settings.obstacle_clearance_m
    if settings.deployment == "grid":
        return grid(rng, settings.agents, region, settings.grid_jitter_m, obstacles, clearance)
    # "uniform" and "strip" both draw uniformly; they differ only in the region.
    return uniform(rng, settings.agents, region, obstacles, clearance)
