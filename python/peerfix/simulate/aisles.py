"""The aisle network of a racked hall: where forklifts drive and people walk.

The racks of a hall stand in blocks; the free strips between the blocks, and
between the blocks and the walls, are the aisles.  Along x the merged x
extents of all racks leave free columns (the dock-side aisle, the picking
aisles, the far aisle); along y the merged y extents leave free rows (front,
cross and back aisles).  A column or row found this way holds no rack at
any point, so its centre line and anything within half its width (less a
clearance) is free space.

The network's nodes are the crossings of column and row centre lines; its
edges join neighbouring crossings along a centre line.  A mover's position
is a point on an edge plus a sideways offset within its aisle.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import shortest_path

from .geometry import as_rects, segments_cross_rects

Bounds = tuple[float, float, float, float]


def free_gaps(lo: float, hi: float, spans: np.ndarray) -> list[tuple[float, float]]:
    """Free intervals of [lo, hi] left by the union of the closed intervals in spans (K, 2)."""
    gaps: list[tuple[float, float]] = []
    cursor = lo
    for a, b in sorted(map(tuple, spans)):
        if a > cursor:
            gaps.append((cursor, min(a, hi)))
        cursor = max(cursor, b)
    if cursor < hi:
        gaps.append((cursor, hi))
    return [g for g in gaps if g[1] > g[0]]


@dataclass(frozen=True)
class AisleNetwork:
    """Crossings (nodes), centre-line edges and how far a mover may stray sideways.

    nodes_m:       (V, 2) crossing points.
    edges:         (E, 2) node indices, each edge along one centre line.
    half_width_m:  (E,) largest sideways offset from the edge's centre line
                   that keeps the clearance to racks and the margin to walls.
    hops_m:        (V, V) shortest driving distance between crossings.
    next_node:     (V, V) predecessor table of those shortest paths (scipy).
    """

    nodes_m: np.ndarray
    edges: np.ndarray
    half_width_m: np.ndarray
    hops_m: np.ndarray
    next_node: np.ndarray

    @property
    def edge_length_m(self) -> np.ndarray:
        return np.linalg.norm(self.nodes_m[self.edges[:, 1]] - self.nodes_m[self.edges[:, 0]], axis=1)

    def normal(self, edge: int) -> np.ndarray:
        """Unit vector across edge `edge` (its centre line turned by +90 degrees)."""
        a, b = self.nodes_m[self.edges[edge]]
        d = (b - a) / np.linalg.norm(b - a)
        return np.array([-d[1], d[0]])

    def point(self, edge: int, along: float, offset_m: float = 0.0) -> np.ndarray:
        """The point at share `along` (0..1) of the edge, moved offset_m across it."""
        a, b = self.nodes_m[self.edges[edge]]
        return a + along * (b - a) + offset_m * self.normal(edge)

    def path_nodes(self, start: int, goal: int) -> list[int]:
        """Crossings of the shortest path start -> goal, both included."""
        out = [goal]
        while out[-1] != start:
            prev = int(self.next_node[start, out[-1]])
            if prev < 0:
                raise ValueError(f"aisle network: crossing {goal} cannot be reached from {start}")
            out.append(prev)
        return out[::-1]


def aisle_network(bounds_m: Bounds, racks_m: object, clearance_m: float, wall_margin_m: float) -> AisleNetwork:
    """The aisle network of a hall with racks (see the module note)."""
    racks = as_rects(racks_m)
    if len(racks) == 0:
        raise ValueError("an aisle network needs racks; use random waypoint motion on an open site")
    xmin, ymin, xmax, ymax = bounds_m
    columns = free_gaps(xmin, xmax, racks[:, [0, 2]])
    rows = free_gaps(ymin, ymax, racks[:, [1, 3]])

    def half_width(gap: tuple[float, float], wall_lo: float, wall_hi: float) -> float:
        lo = gap[0] + (wall_margin_m if gap[0] <= wall_lo else clearance_m)
        hi = gap[1] - (wall_margin_m if gap[1] >= wall_hi else clearance_m)
        centre = 0.5 * (gap[0] + gap[1])
        return max(0.0, min(centre - lo, hi - centre))

    xs = [0.5 * (a + b) for a, b in columns]
    ys = [0.5 * (a + b) for a, b in rows]
    col_half = [half_width(g, xmin, xmax) for g in columns]
    row_half = [half_width(g, ymin, ymax) for g in rows]
    nx, ny = len(xs), len(ys)
    nodes = np.array([(x, y) for y in ys for x in xs])

    def node(i: int, j: int) -> int:
        return j * nx + i

    edges, half = [], []
    for j in range(ny):  # along the rows (x direction)
        for i in range(nx - 1):
            edges.append((node(i, j), node(i + 1, j)))
            half.append(row_half[j])
    for i in range(nx):  # along the columns (y direction)
        for j in range(ny - 1):
            edges.append((node(i, j), node(i, j + 1)))
            half.append(col_half[i])
    edges_arr = np.array(edges, dtype=int).reshape(-1, 2)
    if len(edges_arr) == 0:
        raise ValueError("the racks leave no aisles between them")
    # By construction no centre line enters a rack; checked, since the whole motion model rests on it.
    if segments_cross_rects(nodes[edges_arr[:, 0]], nodes[edges_arr[:, 1]], racks).any():
        raise ValueError("aisle network: a centre line runs through a rack")
    length = np.linalg.norm(nodes[edges_arr[:, 1]] - nodes[edges_arr[:, 0]], axis=1)
    graph = coo_matrix((length, (edges_arr[:, 0], edges_arr[:, 1])), shape=(len(nodes), len(nodes)))
    hops, pred = shortest_path(graph, directed=False, return_predecessors=True)
    return AisleNetwork(nodes, edges_arr, np.array(half), hops, pred)
