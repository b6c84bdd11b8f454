"""Moving scenarios: tags that move, join late and leave early, ranging epoch by epoch.

    simulate("cold-store-shift", seed=1)                    -> 10 min at 5 Hz, 42 tags
    simulate("cold-store-shift", seed=1, duration_s=30.0)   -> the first 30 s of such a shift

A moving preset names a static site (geometry, anchors, radio and ranging
errors: presets.py) and adds groups of movers (motion.py), the recording's
length and epoch rate, who joins late and who leaves early, and a ranging
budget per epoch.

Per epoch (t_s = k / rate_hz) every tag that is switched on starts up to
`anchor_exchanges` ranging exchanges with anchors and up to `peer_exchanges`
with other tags in radio range, partners drawn at random each epoch (a
two-way ranging schedule has room for only a few exchanges per tag and
slot); the answering tag gets the range too, so a pair ranged from both
sides gives one row.  Each range follows the static model (ranging.py):
Gaussian error plus an exponential bias on a blocked path, a path through a
rack always blocked in the cold store.  A tag outside its presence has no
ranges and no truth rows; anchors have a truth row at every epoch.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, replace

import numpy as np

from ..scenario.model import RangeTable, Scenario, Site, Truth
from .aisles import aisle_network
from .anchors import place_anchors
from .deployments import deployment_region
from .geometry import segments_cross_rects
from .motion import Movers, Track, aisle_track, waypoint_track
from .network import agent_ids, ranging_model, site_extra
from .presets import PRESETS, SimulationSettings, setting_names
from .radio import survives_loss
from .ranging import StandardDraws, blocked_flags, measure

MOTIONS = ("aisles", "waypoint")

# Share of the recording in which a late tag is switched on / an early one leaves.
JOIN_WINDOW = (0.1, 0.5)
LEAVE_WINDOW = (0.5, 0.9)
# Epochs per vectorised block of the ranging step (bounds the (C, N, N) distance array).
_BLOCK_EPOCHS = 64

_STREAMS = ("motion", "presence", "schedule", "loss", "noise", "blocked")


@dataclass(frozen=True)
class MovingSettings:
    """Everything that fixes a moving scenario, except the seed.

    site:             static settings of the site (bounds, obstacles, anchors,
                      radio and ranging errors); its agents/deployment are unused.
    motion:           "aisles" (trips along the aisles; needs obstacles) or "waypoint".
    movers:           groups of tags (motion.Movers), in agent-id order.
    duration_s, rate_hz: length of the recording and ranging epochs per second.
    late_joiners:     tags switched on at a random epoch in JOIN_WINDOW of the recording.
    early_leavers:    tags that leave at a random epoch in LEAVE_WINDOW (other tags).
    anchor_exchanges, peer_exchanges: ranging exchanges a tag starts per epoch.
    """

    name: str
    site: SimulationSettings
    motion: str
    movers: tuple[Movers, ...]
    duration_s: float = 600.0
    rate_hz: float = 5.0
    late_joiners: int = 1
    early_leavers: int = 1
    anchor_exchanges: int = 3
    peer_exchanges: int = 3
    description: str = ""

    def __post_init__(self) -> None:
        if self.motion not in MOTIONS:
            raise ValueError(f"motion '{self.motion}': choose one of {', '.join(MOTIONS)}")
        if self.motion == "aisles" and not self.site.obstacles_m:
            raise ValueError("motion 'aisles' needs a site with racks (obstacles_m)")
        if self.motion == "waypoint" and self.site.obstacles_m:
            raise ValueError("motion 'waypoint' goes in straight lines: use it on a site without obstacles")
        if self.agents < 1:
            raise ValueError("a moving scenario needs at least one tag")
        if not (math.isfinite(self.duration_s) and self.duration_s > 0):
            raise ValueError(f"duration_s = {self.duration_s}: must be > 0")
        if not (math.isfinite(self.rate_hz) and self.rate_hz > 0):
            raise ValueError(f"rate_hz = {self.rate_hz}: must be > 0")
        if self.epochs < 1:
            raise ValueError(f"duration_s * rate_hz = {self.duration_s * self.rate_hz}: less than one epoch")
        for name in ("late_joiners", "early_leavers", "anchor_exchanges", "peer_exchanges"):
            if getattr(self, name) < 0:
                raise ValueError(f"{name} = {getattr(self, name)}: must be >= 0")
        if self.late_joiners + self.early_leavers > self.agents:
            raise ValueError("late_joiners + early_leavers exceed the number of tags")
        if (self.late_joiners or self.early_leavers) and self.epochs < 10:
            raise ValueError("joining and leaving tags need at least 10 epochs")

    @property
    def agents(self) -> int:
        return sum(m.count for m in self.movers)

    @property
    def epochs(self) -> int:
        return int(round(self.duration_s * self.rate_hz))

    def epoch_times_s(self) -> np.ndarray:
        return np.arange(self.epochs) / self.rate_hz


def moving_setting_names() -> list[str]:
    """Override keys of a moving preset: its own fields, and the site's
    radio/ranging fields (not agents, deployment or geometry)."""
    own = [f.name for f in fields(MovingSettings) if f.name not in ("name", "site", "movers", "motion")]
    fixed_site = {"name", "bounds_m", "agents", "deployment", "grid_jitter_m", "strip_length_m", "strip_width_m",
                  "obstacles_m", "obstacle_kind", "description"}
    return own + [n for n in setting_names() if n not in fixed_site]


def resolve_moving(base: MovingSettings, **overrides: object) -> MovingSettings:
    """The moving preset with single fields replaced (its own, or its site's)."""
    allowed = set(moving_setting_names())
    unknown = sorted(set(overrides) - allowed)
    if unknown:
        raise TypeError(f"unknown setting(s) for the moving preset '{base.name}': {', '.join(unknown)}")
    own = {f.name for f in fields(MovingSettings)}
    mine = {k: v for k, v in overrides.items() if k in own}
    theirs = {k: v for k, v in overrides.items() if k not in own}
    if theirs:
        from . import resolve_settings  # the static rules (anchors, explicit lists)

        mine["site"] = resolve_settings(base.site, **theirs)
    return replace(base, **mine)


# --------------------------------------------------------------------------- presets


MOVING_PRESETS: dict[str, MovingSettings] = {
    "cold-store-shift": MovingSettings(
        name="cold-store-shift",
        description="cold store hall during a shift: 10 forklifts on the aisles and 32 people walking to the "
        "racks, 10 min at 5 Hz; one tag switched on late, one leaves early",
        site=PRESETS["cold-store"],
        motion="aisles",
        # Forklift speed: indoor sites commonly cap it near 10 km/h (2.8 m/s) and ask for
        # walking pace at aisle ends and crossings; walking is about 1.4 m/s (common
        # practice, values from memory).
        movers=(
            Movers("forklift", 10, speed_mps=(1.5, 2.8), pause_s=(5.0, 30.0), offset_share=0.0,
                   turn_speed_mps=1.0, turn_slow_m=3.0),
            Movers("person", 32, speed_mps=(0.6, 1.5), pause_s=(5.0, 60.0), offset_share=0.8),
        ),
    ),
    "open-field-walk": MovingSettings(
        name="open-field-walk",
        description="open field, 80 people on random waypoint trips, 5 min at 5 Hz; one joins late, one leaves early",
        site=PRESETS["open-field"],
        motion="waypoint",
        movers=(Movers("person", 80, speed_mps=(0.5, 1.5), pause_s=(0.0, 20.0)),),
        duration_s=300.0,
    ),
    "mine-drift-traffic": MovingSettings(
        name="mine-drift-traffic",
        description="mine drift: 24 miners walking and 6 vehicles on random waypoint trips along the drift, "
        "10 min at 5 Hz; one tag joins late, one leaves early",
        site=PRESETS["mine-drift"],
        motion="waypoint",
        movers=(
            Movers("miner", 24, speed_mps=(0.6, 1.4), pause_s=(0.0, 60.0)),
            Movers("vehicle", 6, speed_mps=(2.0, 6.0), pause_s=(10.0, 60.0)),
        ),
    ),
}


def list_moving_presets() -> list[str]:
    return list(MOVING_PRESETS)


# --------------------------------------------------------------------------- building


def _streams(seed: int) -> dict[str, np.random.SeedSequence]:
    children = np.random.SeedSequence(seed).spawn(len(_STREAMS))
    return dict(zip(_STREAMS, children))


def mover_roles(settings: MovingSettings) -> list[str]:
    return [m.role for m in settings.movers for _ in range(m.count)]


def tracks(settings: MovingSettings, seed_seq: np.random.SeedSequence) -> list[Track]:
    """One track per tag, each from its own random stream (a tag's path does not
    depend on how many tags there are after it)."""
    site = settings.site
    per_tag = seed_seq.spawn(settings.agents)
    group = [m for m in settings.movers for _ in range(m.count)]
    out: list[Track] = []
    if settings.motion == "aisles":
        net = aisle_network(site.bounds_m, site.obstacles_m, site.obstacle_clearance_m, site.agent_margin_m)
        for movers, ss in zip(group, per_tag):
            out.append(aisle_track(net, movers, np.random.default_rng(ss), settings.duration_s))
    else:
        region = deployment_region(site)
        for movers, ss in zip(group, per_tag):
            out.append(waypoint_track(region, movers, np.random.default_rng(ss), settings.duration_s))
    return out


def presence(settings: MovingSettings, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """(enter_epoch, leave_epoch) per tag: switched on for enter <= k < leave."""
    n, e = settings.agents, settings.epochs
    enter = np.zeros(n, dtype=int)
    leave = np.full(n, e, dtype=int)
    chosen = rng.permutation(n)[: settings.late_joiners + settings.early_leavers]
    late, early = chosen[: settings.late_joiners], chosen[settings.late_joiners:]
    for who, window, target in ((late, JOIN_WINDOW, enter), (early, LEAVE_WINDOW, leave)):
        lo = max(1, int(math.ceil(window[0] * e)))
        hi = max(lo + 1, int(math.floor(window[1] * e)))
        target[who] = rng.integers(lo, hi, size=len(who))
    return enter, leave


def _pick_exchanges(e, i, j, n_anchors, anchor_budget, peer_budget, rng) -> np.ndarray:
    """(P,) bool: candidate pairs (epoch e, node i < node j, j a tag) that range this epoch.

    Each tag starts exchanges with up to anchor_budget anchors and peer_budget
    tags, chosen at random; a pair ranges when either side chose it.
    """
    m = len(e)
    peer = i >= n_anchors
    cand = np.arange(m)
    # Directed requests: tag j asks i; a peer i also asks j.
    ask_e = np.concatenate([e, e[peer]])
    ask_from = np.concatenate([j, i[peer]])
    ask_pair = np.concatenate([cand, cand[peer]])
    to_peer = np.concatenate([peer, np.ones(int(peer.sum()), dtype=bool)])
    key = rng.uniform(size=len(ask_e))
    # One sort: the group (epoch, asking tag, anchor or peer) as the integer part, half the draw as
    # the fraction (below 0.5, so rounding never carries a draw into the next group).
    group = (ask_e.astype(np.int64) * (int(ask_from.max(initial=0)) + 1) + ask_from) * 2 + to_peer
    order = np.argsort(group + 0.5 * key, kind="stable")
    g, gp = group[order], to_peer[order]
    new_group = np.ones(len(order), dtype=bool)
    new_group[1:] = g[1:] != g[:-1]
    starts = np.flatnonzero(new_group)
    rank = np.arange(len(order)) - np.repeat(starts, np.diff(np.append(starts, len(order))))
    budget = np.where(gp, peer_budget, anchor_budget)
    keep = np.zeros(m, dtype=bool)
    keep[ask_pair[order][rank < budget]] = True
    return keep


def build_moving_scenario(settings: MovingSettings, seed: int) -> Scenario:
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise ValueError(f"seed = {seed!r}: must be a non-negative integer")
    seed = int(seed)
    ss = _streams(seed)
    rng = {name: np.random.default_rng(s) for name, s in ss.items() if name != "motion"}
    site = settings.site

    anc_ids, anc_xy = place_anchors(site)
    tag_ids = agent_ids(settings.agents)
    if set(anc_ids) & set(tag_ids):
        raise ValueError("an explicit anchor id clashes with an agent id")
    node_ids = np.array(anc_ids + tag_ids, dtype=object)
    na, n = len(anc_ids), len(anc_ids) + len(tag_ids)

    t = settings.epoch_times_s()
    enter, leave = presence(settings, rng["presence"])
    k = np.arange(len(t))[:, None]
    on = np.hstack([np.ones((len(t), na), dtype=bool), (k >= enter) & (k < leave)])  # (E, N)
    xy = np.empty((len(t), n, 2))
    xy[:, :na] = anc_xy
    for a, track in enumerate(tracks(settings, ss["motion"])):
        xy[:, na + a] = track.at(t)

    rows = _ranging(settings, xy, on, na, rng)
    e, i, j, dist, crosses = rows
    keep = survives_loss(rng["loss"].uniform(size=len(e)), site.packet_loss)
    draws = StandardDraws.draw(rng["noise"], rng["blocked"], len(e))
    blocked = blocked_flags(crosses, draws.u_blocked, site.blocked_probability, site.obstacle_blocked_probability)
    range_m = measure(dist, blocked, draws, site.sigma_m, site.sigma_per_m, site.blocked_bias_mean_m)
    e, i, j, blocked, range_m = e[keep], i[keep], j[keep], blocked[keep], range_m[keep]

    ranges = RangeTable(
        t_s=t[e],
        node_a=node_ids[i].tolist(),
        node_b=node_ids[j].tolist(),
        range_m=range_m,
        extra={"blocked": np.where(blocked, "1", "0").tolist()},
        line=np.zeros(len(e), dtype=int),
    )
    te, tn = np.nonzero(on)  # epoch-major, nodes in id order
    truth = Truth(t_s=t[te], node_id=node_ids[tn].tolist(), xy_m=xy[te, tn])
    extra = site_extra(site, seed, na)
    extra["simulation"].update(_motion_table(settings, enter, leave, t))
    if settings.motion == "aisles":
        extra["simulation"].pop("region_m", None)  # tags keep to the aisle network, not a region
    out_site = Site(
        name=settings.name,
        bounds_m=tuple(float(v) for v in site.bounds_m),
        ranging=ranging_model(site, crosses, range_m),
        extra=extra,
    )
    end_s = settings.epochs / settings.rate_hz
    agent_extra = {
        "role": mover_roles(settings),
        "enter_s": [repr(float(t[x])) for x in enter],
        "leave_s": [repr(float(t[x]) if x < len(t) else float(end_s)) for x in leave],
    }
    return Scenario(site=out_site, anchor_ids=anc_ids, anchor_xy_m=anc_xy, agent_ids=tag_ids,
                    ranges=ranges, truth=truth, agent_extra=agent_extra)


def _ranging(settings: MovingSettings, xy: np.ndarray, on: np.ndarray, na: int, rng) -> tuple[np.ndarray, ...]:
    """Rows that range: (epoch, node i, node j, true distance, path through an obstacle).

    Vectorised over blocks of epochs; rows come out sorted by epoch, then i, then j.
    """
    site = settings.site
    n = xy.shape[1]
    upper = np.triu(np.ones((n, n), dtype=bool), 1)
    upper[:, :na] = False  # j must be a tag (anchors come first), so no anchor-anchor pairs
    out: list[tuple[np.ndarray, ...]] = []
    for e0 in range(0, len(xy), _BLOCK_EPOCHS):
        p = np.where(on[e0:e0 + _BLOCK_EPOCHS, :, None], xy[e0:e0 + _BLOCK_EPOCHS], np.nan)
        d = np.sqrt(np.sum((p[:, :, None, :] - p[:, None, :, :]) ** 2, axis=-1))
        with np.errstate(invalid="ignore"):
            cand = (d <= site.radio_range_m) & upper  # NaN (switched off) compares False
        e, i, j = np.nonzero(cand)
        keep = _pick_exchanges(e, i, j, na, settings.anchor_exchanges, settings.peer_exchanges, rng["schedule"])
        e, i, j = e[keep], i[keep], j[keep]
        pe = e0 + e
        crosses = np.concatenate([
            # Slices of rows keep the (rows, racks) temporaries in cache: several times faster.
            segments_cross_rects(xy[pe[s:s + 2048], i[s:s + 2048]], xy[pe[s:s + 2048], j[s:s + 2048]],
                                 site.obstacles_m)
            for s in range(0, len(pe), 2048)
        ]) if len(pe) else np.zeros(0, dtype=bool)
        out.append((pe, i, j, d[e, i, j], crosses))
    return tuple(np.concatenate([o[k] for o in out]) for k in range(5))


def _motion_table(settings: MovingSettings, enter: np.ndarray, leave: np.ndarray, t: np.ndarray) -> dict:
    """site.toml [simulation] keys of a moving scenario (TOML-safe types)."""
    late = [int(a) for a in np.flatnonzero(enter > 0)]
    early = [int(a) for a in np.flatnonzero(leave < len(t))]
    ids = agent_ids(settings.agents)
    return {
        "preset": settings.name,
        "description": settings.description,
        "deployment": f"moving ({settings.motion})",
        "agents": int(settings.agents),
        "motion": settings.motion,
        "duration_s": float(settings.duration_s),
        "rate_hz": float(settings.rate_hz),
        "epochs": int(settings.epochs),
        "anchor_exchanges_per_epoch": int(settings.anchor_exchanges),
        "peer_exchanges_per_epoch": int(settings.peer_exchanges),
        "late_joiners": [ids[a] for a in late],
        "early_leavers": [ids[a] for a in early],
        "movers": [
            {"role": m.role, "count": int(m.count), "speed_mps": [float(v) for v in m.speed_mps],
             "pause_s": [float(v) for v in m.pause_s], "offset_share": float(m.offset_share),
             "turn_speed_mps": float(m.turn_speed_mps), "turn_slow_m": float(m.turn_slow_m)}
            for m in settings.movers
        ],
    }
