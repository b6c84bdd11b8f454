"""How simulated tags move: trips along the aisles of a hall, or random waypoint.

A track is a piecewise-linear path in time: knots (t_s, x_m, y_m), with a
pause as two knots at the same place.  Between knots a mover goes in a
straight line at the speed of its current trip, so its speed never exceeds
the largest speed of its group, and the position at any time is a linear
interpolation (numpy.interp) between the knots.

Aisle trips (a racked hall, see aisles.py): a trip goes from where the mover
stands to a spot drawn on the aisle network (an edge chosen with probability
proportional to its length, a point along it, and a sideways offset within
the aisle), along the shortest path over the aisle crossings; then the mover
pauses (loading, picking).  Forklifts keep to the centre lines (offset
share 0) and slow down for the turns at aisle crossings; people walk up to
the rack faces.

Random waypoint (an open site): a trip goes in a straight line to a point
drawn uniformly in the region, then the mover pauses.  The speeds are drawn
from [v_min, v_max] with v_min > 0, which avoids the known decay of the mean
speed of the model when v_min = 0 (Yoon, Liu, Noble, "Random waypoint
considered harmful", IEEE INFOCOM 2003).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .aisles import AisleNetwork

Region = tuple[float, float, float, float]

# A change of heading above this is a turn (a mover slows for it, see Movers.turn_slow_m).
TURN_DEG = 30.0


@dataclass(frozen=True)
class Movers:
    """One group of tags that move alike.

    role:          name written to agents.csv (`role` column), e.g. "forklift".
    count:         tags in the group.
    speed_mps:     (v_min, v_max) of the speed drawn per trip; v_min > 0.
    pause_s:       (p_min, p_max) of the pause drawn after each trip (and before the first).
    offset_share:  aisle motion only: share of the aisle half width a spot may lie
                   off the centre line (0: on the centre line).
    turn_speed_mps, turn_slow_m: a mover faster than turn_speed_mps goes at that
                   speed within turn_slow_m before and after a turn (a change of
                   heading above TURN_DEG); 0 m: no slowing.
    """

    role: str
    count: int
    speed_mps: tuple[float, float]
    pause_s: tuple[float, float]
    offset_share: float = 0.0
    turn_speed_mps: float = 1.0
    turn_slow_m: float = 0.0

    def __post_init__(self) -> None:
        if self.count < 0:
            raise ValueError(f"movers '{self.role}': count = {self.count} must be >= 0")
        lo, hi = self.speed_mps
        if not 0 < lo <= hi:
            raise ValueError(f"movers '{self.role}': speed_mps {self.speed_mps} needs 0 < v_min <= v_max")
        lo, hi = self.pause_s
        if not 0 <= lo <= hi:
            raise ValueError(f"movers '{self.role}': pause_s {self.pause_s} needs 0 <= p_min <= p_max")
        if not 0 <= self.offset_share <= 1:
            raise ValueError(f"movers '{self.role}': offset_share = {self.offset_share} must be in [0, 1]")
        if self.turn_speed_mps <= 0 or self.turn_slow_m < 0:
            raise ValueError(f"movers '{self.role}': need turn_speed_mps > 0 and turn_slow_m >= 0")


@dataclass(frozen=True)
class Track:
    """Knots of one mover's path: t_s (K,) non-decreasing, xy_m (K, 2)."""

    t_s: np.ndarray
    xy_m: np.ndarray

    def at(self, t_s: np.ndarray) -> np.ndarray:
        """(T, 2) positions at the times t_s (held at the ends outside the knots)."""
        t = np.asarray(t_s, float)
        return np.column_stack([np.interp(t, self.t_s, self.xy_m[:, 0]), np.interp(t, self.t_s, self.xy_m[:, 1])])


class _Knots:
    """Builds a track leg by leg."""

    def __init__(self, start_xy: np.ndarray) -> None:
        self.t = [0.0]
        self.xy = [np.asarray(start_xy, float)]

    @property
    def now_s(self) -> float:
        return self.t[-1]

    def pause(self, dt_s: float) -> None:
        self.t.append(self.t[-1] + dt_s)
        self.xy.append(self.xy[-1])

    def _leg(self, p: np.ndarray, speed_mps: float) -> None:
        step = float(np.hypot(*(p - self.xy[-1])))
        if step >= 1e-9:
            self.t.append(self.t[-1] + step / speed_mps)
            self.xy.append(np.asarray(p, float))

    def go(self, points: list[np.ndarray], speed_mps: float, turn_speed_mps: float = 1.0,
           turn_slow_m: float = 0.0) -> None:
        """Straight legs through `points`; within turn_slow_m of a turn at most turn_speed_mps."""
        path = [self.xy[-1]]
        for p in points:  # corners that are the point itself are no corners
            if float(np.hypot(*(np.asarray(p, float) - path[-1]))) >= 1e-9:
                path.append(np.asarray(p, float))
        turn = [False] * len(path)
        cos_turn = np.cos(np.radians(TURN_DEG))
        for k in range(1, len(path) - 1):
            a, b = path[k] - path[k - 1], path[k + 1] - path[k]
            turn[k] = float(a @ b) < cos_turn * float(np.linalg.norm(a) * np.linalg.norm(b))
        slow = min(turn_speed_mps, speed_mps)
        for k in range(1, len(path)):
            p0, p1 = path[k - 1], path[k]
            length = float(np.hypot(*(p1 - p0)))
            u = (p1 - p0) / length
            head = turn_slow_m if turn[k - 1] else 0.0
            tail = turn_slow_m if turn[k] else 0.0
            if turn_slow_m <= 0 or slow >= speed_mps or (head == 0.0 and tail == 0.0):
                self._leg(p1, speed_mps)
            elif head + tail >= length:
                self._leg(p1, slow)  # a short leg between turns: slow all the way
            else:
                if head:
                    self._leg(p0 + head * u, slow)
                self._leg(p1 - tail * u, speed_mps)
                if tail:
                    self._leg(p1, slow)

    def track(self) -> Track:
        return Track(np.array(self.t), np.array(self.xy).reshape(-1, 2))


# --------------------------------------------------------------------------- aisles


@dataclass(frozen=True)
class Spot:
    """A place on the aisle network: edge, share along it, sideways offset."""

    edge: int
    along: float
    offset_m: float


def draw_spot(net: AisleNetwork, movers: Movers, rng: np.random.Generator) -> Spot:
    length = net.edge_length_m
    edge = int(rng.choice(len(length), p=length / length.sum()))
    along = float(rng.uniform())
    offset = float(rng.uniform(-1.0, 1.0)) * movers.offset_share * float(net.half_width_m[edge])
    return Spot(edge, along, offset)


def aisle_route(net: AisleNetwork, start: Spot, goal: Spot) -> list[np.ndarray]:
    """Corner points from start to goal: back to the centre line, along the
    shortest way over the crossings, out to the goal's offset."""
    c0 = net.point(start.edge, start.along)
    c1 = net.point(goal.edge, goal.along)
    points = [c0]
    if start.edge != goal.edge:
        ends0, ends1 = net.edges[start.edge], net.edges[goal.edge]
        best = None
        for a in ends0:
            for b in ends1:
                cost = float(np.hypot(*(net.nodes_m[a] - c0))) + net.hops_m[a, b] + float(np.hypot(*(net.nodes_m[b] - c1)))
                if best is None or cost < best[0]:
                    best = (cost, int(a), int(b))
        assert best is not None
        points += [net.nodes_m[k] for k in net.path_nodes(best[1], best[2])]
    points += [c1, net.point(goal.edge, goal.along, goal.offset_m)]
    return points


def aisle_track(net: AisleNetwork, movers: Movers, rng: np.random.Generator, duration_s: float) -> Track:
    """Trips over the aisle network until duration_s is covered."""
    spot = draw_spot(net, movers, rng)
    knots = _Knots(net.point(spot.edge, spot.along, spot.offset_m))
    knots.pause(float(rng.uniform(*movers.pause_s)))
    while knots.now_s < duration_s:
        goal = draw_spot(net, movers, rng)
        knots.go(aisle_route(net, spot, goal), float(rng.uniform(*movers.speed_mps)),
                 movers.turn_speed_mps, movers.turn_slow_m)
        knots.pause(float(rng.uniform(*movers.pause_s)))
        spot = goal
    return knots.track()


# --------------------------------------------------------------------------- random waypoint


def waypoint_track(region_m: Region, movers: Movers, rng: np.random.Generator, duration_s: float) -> Track:
    """Random waypoint trips inside region_m until duration_s is covered."""
    lo, hi = np.array(region_m[:2], float), np.array(region_m[2:], float)
    knots = _Knots(rng.uniform(lo, hi))
    knots.pause(float(rng.uniform(*movers.pause_s)))
    while knots.now_s < duration_s:
        knots.go([rng.uniform(lo, hi)], float(rng.uniform(*movers.speed_mps)))
        knots.pause(float(rng.uniform(*movers.pause_s)))
    return knots.track()
