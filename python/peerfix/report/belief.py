"""Belief pictures' arithmetic: which agent to show, and its density on a grid.

Kept apart from the drawing so the choice and the numbers can be tested
without looking at pixels.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..driver import IterationRecord
from ..reference.mixture import Mixture, det2, inv2

WITHIN_M = 1.0  # "resolved" means within this of the truth at the end


@dataclass(frozen=True)
class AgentPick:
    index: int  # position in the scenario's agent list
    reason: str  # "multimodal-first-iteration" | "multimodal-anchors-only" | "largest-error-drop"
    error_start_m: float  # first panel's error (see pick_agent)
    error_end_m: float  # cooperative run, final iteration
    resolved: bool  # multimodal at the start; unimodal and within 1 m at the end


def errors_m(est_xy: np.ndarray, truth_xy: np.ndarray) -> np.ndarray:
    d = np.asarray(est_xy, float) - np.asarray(truth_xy, float)
    return np.hypot(d[:, 0], d[:, 1])


def pick_agent(
    coop: list[IterationRecord],
    truth_xy: np.ndarray,
    anchors_only: IterationRecord | None = None,
) -> AgentPick:
    """The agent whose belief tells the story of cooperation best.

    In order of preference:
    1. multimodal (mode_count >= 2) after the first cooperative iteration,
       and at the end unimodal and within 1 m;
    2. multimodal with anchors alone (the anchors-only run's final belief),
       and at the end of the cooperative run unimodal and within 1 m;
    3. the largest error drop from the first picture to the last.
    Within a rule the largest error drop wins; ties go to the earlier agent.
    With the slot schedule, rule 1 rarely fires: most agents already hear
    peers within their first update, so rule 2 is what finds the ambiguity
    that cooperation removes.
    """
    end = errors_m(coop[-1].mean, truth_xy)
    settled = (end <= WITHIN_M) & (np.asarray(coop[-1].mode_count) == 1)
    first = errors_m(coop[0].mean, truth_xy)
    rules = [("multimodal-first-iteration", coop[0].mode_count, first)]
    if anchors_only is not None:
        rules.append(("multimodal-anchors-only", anchors_only.mode_count, errors_m(anchors_only.mean, truth_xy)))
    for reason, mode_count, start in rules:
        ok = np.flatnonzero((np.asarray(mode_count) >= 2) & settled)
        if ok.size:
            i = int(ok[np.argmax(start[ok] - end[ok])])
            return AgentPick(i, reason, float(start[i]), float(end[i]), True)
    start = rules[-1][2]
    i = int(np.argmax(start - end))
    return AgentPick(i, "largest-error-drop", float(start[i]), float(end[i]), False)


def mixture_density(mix: Mixture, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Density of a 2-D Gaussian mixture at the points (x, y) (any equal shapes), in 1/m^2."""
    pts = np.stack([np.asarray(x, float).ravel(), np.asarray(y, float).ravel()], axis=1)
    w = mix.weights()
    inv = inv2(mix.cov)
    norm = w / (2.0 * np.pi * np.sqrt(det2(mix.cov)))
    out = np.zeros(pts.shape[0])
    for k in range(len(mix)):
        d = pts - mix.mean[k]
        q = np.einsum("ni,ij,nj->n", d, inv[k], d)
        out += norm[k] * np.exp(-0.5 * q)
    return out.reshape(np.shape(x))


def mass_levels(density: np.ndarray, cell_area_m2: float, shares=(0.99, 0.9, 0.5)) -> list[float]:
    """Density thresholds whose super-level sets hold the given shares of the grid's mass.

    Returned in increasing order (ready for contourf); a share the grid cannot
    tell apart from its neighbour (a very sharp peak) may repeat a level, and
    repeats are dropped.
    """
    flat = np.sort(density.ravel())[::-1]
    mass = np.cumsum(flat) * cell_area_m2
    total = mass[-1]
    if not np.isfinite(total) or total <= 0:
        return []
    levels = []
    for s in shares:
        k = min(int(np.searchsorted(mass, s * total)), flat.size - 1)
        levels.append(float(flat[k]))
    return sorted(set(v for v in levels if v > 0))


def window_m(
    truth: np.ndarray,
    beliefs: list[Mixture | None],
    min_half_m: float = 3.0,
    max_half_m: float = 15.0,
    margin_m: float = 2.0,
    min_weight: float = 0.01,
) -> tuple[float, float, float, float]:
    """A square window (xmin, xmax, ymin, ymax) holding the truth and every
    component mean with at least min_weight, plus a margin; its half-width is
    clamped, so a far stray component cannot shrink the picture to nothing."""
    pts = [np.asarray(truth, float).reshape(1, 2)]
    for b in beliefs:
        if b is not None and len(b):
            pts.append(b.mean[b.weights() >= min_weight])
    pts_a = np.concatenate(pts)
    centre = np.asarray(truth, float)
    half = float(np.max(np.abs(pts_a - centre))) + margin_m
    half = min(max(half, min_half_m), max_half_m)
    return centre[0] - half, centre[0] + half, centre[1] - half, centre[1] + half
