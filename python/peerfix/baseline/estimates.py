"""One engine's estimates over a run, as arrays, and their CSV files.

Arrays are indexed [epoch, stored iteration, agent].  The float twin's CSV
holds repr() floats (the shortest text that reads back to the same float64,
so a round trip is exact); the fixed core's CSV holds the exact integers of
its Q formats (x_q10 = x_m * 2^10 and so on), so "bit-exact" compares the
integers the core produced.  An empty cell is an estimate that does not
exist (NaN in the arrays: an agent not yet joined, or gone).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..core.engine_fixed import (  # no compiled module needed
    AREA_FRAC,
    FRAC_FRAC,
    LEN_FRAC,
)
from ..errors import InputError
from ..runner import RunResult

# Fractional bits of the fixed core's reports: position, covariance, mode weight.
Q_FORMATS = {"position": LEN_FRAC, "area": AREA_FRAC, "fraction": FRAC_FRAC}

KEY_COLUMNS = ["t_s", "node_id", "iteration"]
COUNT_COLUMNS = ["mode_count", "components"]


@dataclass
class Estimates:
    t_s: np.ndarray  # (E,)
    agent_ids: list[str]
    iterations: np.ndarray  # (S,) 1-based iteration numbers stored per epoch
    mean_m: np.ndarray  # (E, S, N, 2)
    cov_m2: np.ndarray  # (E, S, N, 2, 2)
    mode_count: np.ndarray  # (E, S, N) int
    mode_weight: np.ndarray  # (E, S, N)
    components: np.ndarray  # (E, S, N) int
    # (E, N) bool: the agent took part in the epoch.  Known for a run, not stored in the CSV files
    # (both engines run the same schedule, so the run made now tells it for the recorded one too).
    present: np.ndarray | None = None

    @property
    def shape(self) -> tuple[int, int, int]:
        return self.mode_count.shape  # type: ignore[return-value]


def from_run(result: RunResult, final_only: bool = False) -> Estimates:
    """Every iteration of every epoch, or (final_only) the last iteration of each."""
    per_epoch = [e.iterations[-1:] if final_only else e.iterations for e in result.epochs]
    its = [[it for it in iters] for iters in per_epoch]
    numbers = {tuple(it.iteration for it in iters) for iters in its}
    n = len(result.scenario.agent_ids)
    if len(numbers) != 1:
        raise ValueError(f"epochs store different iterations: {sorted(numbers)}")
    return Estimates(
        t_s=np.array([e.t_s for e in result.epochs], float),
        agent_ids=list(result.scenario.agent_ids),
        iterations=np.array(next(iter(numbers)), int),
        mean_m=np.array([[it.mean for it in iters] for iters in its], float),
        cov_m2=np.array([[it.cov for it in iters] for iters in its], float),
        mode_count=np.array([[it.mode_count for it in iters] for iters in its], int),
        mode_weight=np.array([[it.mode_weight for it in iters] for iters in its], float),
        components=np.array([[it.components for it in iters] for iters in its], int),
        present=np.array([e.took_part(n) for e in result.epochs], bool).reshape(len(result.epochs), n),
    )


# --------------------------------------------------------------------------- columns


def float_columns() -> list[str]:
    return [*KEY_COLUMNS, "x_m", "y_m", "cov_xx_m2", "cov_xy_m2", "cov_yy_m2", "mode_weight", *COUNT_COLUMNS]


def fixed_columns(q: dict[str, int] = Q_FORMATS) -> list[str]:
    p, a, f = q["position"], q["area"], q["fraction"]
    return [*KEY_COLUMNS, f"x_q{p}", f"y_q{p}", f"cov_xx_q{a}", f"cov_xy_q{a}", f"cov_yy_q{a}", f"mode_weight_q{f}", *COUNT_COLUMNS]


def _value_arrays(est: Estimates) -> list[np.ndarray]:
    """The six value columns, each (E, S, N), in column order."""
    m, c = est.mean_m, est.cov_m2
    return [m[..., 0], m[..., 1], c[..., 0, 0], c[..., 0, 1], c[..., 1, 1], est.mode_weight]


def _scales(q: dict[str, int]) -> list[int]:
    p, a, f = q["position"], q["area"], q["fraction"]
    return [p, p, a, a, a, f]


def to_integers(values: np.ndarray, frac_bits: int, what: str) -> np.ndarray:
    """values * 2^frac_bits as exact integers (float array, NaN kept: no estimate); ValueError
    if any finite value is not one (not a Q value)."""
    scaled = values * float(1 << frac_bits)  # exact: a power-of-two scale
    known = ~np.isnan(scaled)
    if not np.all(np.isfinite(scaled[known])) or not np.all(scaled[known] == np.round(scaled[known])):
        raise ValueError(f"{what}: not a multiple of 2^-{frac_bits}; the fixed core's reports changed format")
    return scaled


def _cell(v: float, fixed: bool) -> str:
    """One value as text: exact integer (fixed), repr float (float twin), empty for no estimate (NaN)."""
    if np.isnan(v):
        return ""
    return str(int(v)) if fixed else repr(float(v))


# --------------------------------------------------------------------------- files


def write_csv(est: Estimates, path: Path, fixed: bool, q: dict[str, int] = Q_FORMATS) -> None:
    columns = fixed_columns(q) if fixed else float_columns()
    values = _value_arrays(est)
    if fixed:
        values = [to_integers(v, b, name) for v, b, name in zip(values, _scales(q), columns[3:9])]
    E, S, N = est.shape
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(columns)
        for e in range(E):
            t = repr(float(est.t_s[e]))
            for s in range(S):
                for n in range(N):
                    cells = [_cell(float(v[e, s, n]), fixed) for v in values]
                    w.writerow([t, est.agent_ids[n], int(est.iterations[s]), *cells, int(est.mode_count[e, s, n]), int(est.components[e, s, n])])


def read_csv(path: Path, fixed: bool, agent_ids: list[str], q: dict[str, int] = Q_FORMATS) -> Estimates:
    """Read an estimates CSV written by write_csv; InputError (file, line, field) when it is not one."""
    columns = fixed_columns(q) if fixed else float_columns()
    if not path.is_file():
        raise InputError(path, 0, None, "baseline estimates file missing")
    if not agent_ids:
        raise InputError(path, 0, None, "the manifest lists no agents for these estimates")
    rows: list[list[str]] = []
    with open(path, newline="") as f:
        reader = csv.reader(f)
        header = next(reader, None)
        if header != columns:
            raise InputError(path, 1, None, f"header {header} is not {columns}")
        rows = list(reader)
    if not rows:
        raise InputError(path, 0, None, "no estimates")
    t_keys: list[str] = []
    iters: list[int] = []
    for line, row in enumerate(rows, start=2):
        if len(row) != len(columns):
            raise InputError(path, line, None, f"{len(row)} cells, expected {len(columns)}")
        if not t_keys or t_keys[-1] != row[0]:
            t_keys.append(row[0])
        if len(t_keys) == 1 and row[1] == agent_ids[0]:
            iters.append(_int(path, line, "iteration", row[2]))
    E, S, N = len(t_keys), len(iters), len(agent_ids)
    if E * S * N != len(rows):
        raise InputError(path, 0, None, f"{len(rows)} rows do not make {E} epochs x {S} iterations x {N} agents")
    values = np.empty((6, len(rows)))
    counts = np.empty((2, len(rows)), np.int64)
    k = 0
    for e in range(E):
        for s in range(S):
            for n in range(N):
                line, row = k + 2, rows[k]
                expected = (t_keys[e], agent_ids[n], str(iters[s]))
                if tuple(row[:3]) != expected:
                    raise InputError(path, line, None, f"row key {tuple(row[:3])}, expected {expected} (rows out of order or agents differ)")
                for j in range(6):
                    name = columns[3 + j]
                    values[j, k] = _q_int(path, line, name, row[3 + j]) if fixed else _float(path, line, name, row[3 + j])
                counts[0, k] = _int(path, line, "mode_count", row[9])
                counts[1, k] = _int(path, line, "components", row[10])
                k += 1
    if fixed:
        for j, b in enumerate(_scales(q)):
            values[j] /= float(1 << b)  # exact for |ints| < 2^53
    v = values.reshape(6, E, S, N)
    return Estimates(
        t_s=np.array([float(t) for t in t_keys]),
        agent_ids=list(agent_ids),
        iterations=np.array(iters, int),
        mean_m=np.stack([v[0], v[1]], axis=-1),
        cov_m2=np.stack([np.stack([v[2], v[3]], -1), np.stack([v[3], v[4]], -1)], -2),
        mode_count=counts[0].reshape(E, S, N),
        mode_weight=v[5],
        components=counts[1].reshape(E, S, N),
    )


def _int(path: Path, line: int, field: str, text: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise InputError(path, line, field, f"{text!r} is not an integer") from None


def _q_int(path: Path, line: int, field: str, text: str) -> float:
    """A Q-format integer cell; empty is no estimate (NaN)."""
    return float("nan") if text == "" else float(_int(path, line, field, text))


def _float(path: Path, line: int, field: str, text: str) -> float:
    if text == "":
        return float("nan")
    try:
        return float(text)
    except ValueError:
        raise InputError(path, line, field, f"{text!r} is not a number") from None
