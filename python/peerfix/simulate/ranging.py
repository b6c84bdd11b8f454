"""Ranging error model: Gaussian line-of-sight error plus a blocked-path bias.

    r = max(0, d + sigma(d) * z + b * bias)
    sigma(d) = sigma_m + sigma_per_m * d
    z ~ N(0, 1),  bias ~ Exponential(mean blocked_bias_mean_m)

b = 1 for a blocked path.  A path through an obstacle is blocked with
probability obstacle_blocked_probability; any other path with probability
blocked_probability.  A positive exponential bias on top of Gaussian noise is
one of the published blocked-path models (Bellusci et al., Research Letters
in Communications, 2009).  A negative draw is clipped to 0 m because a
ranging radio reports a time of flight, never a negative one.

The random parts are drawn as standard variates for every candidate pair,
independent of the model's numbers, so one seed gives the same noise
pattern when only sigma or the bias mean changes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class StandardDraws:
    """Per-pair standard variates: z ~ N(0,1), u ~ U(0,1), e ~ Exp(1)."""

    z: np.ndarray
    u_blocked: np.ndarray
    e_bias: np.ndarray

    @classmethod
    def draw(cls, rng_noise: np.random.Generator, rng_blocked: np.random.Generator, n: int) -> "StandardDraws":
        return cls(
            z=rng_noise.standard_normal(n),
            u_blocked=rng_blocked.uniform(size=n),
            e_bias=rng_blocked.standard_exponential(n),
        )

    def take(self, keep: np.ndarray) -> "StandardDraws":
        return StandardDraws(self.z[keep], self.u_blocked[keep], self.e_bias[keep])


def sigma_at(distance_m: np.ndarray, sigma_m: float, sigma_per_m: float) -> np.ndarray:
    """Line-of-sight standard deviation at each true distance."""
    return sigma_m + sigma_per_m * np.asarray(distance_m, dtype=float)


def blocked_flags(
    crosses_obstacle: np.ndarray,
    u_blocked: np.ndarray,
    blocked_probability: float,
    obstacle_blocked_probability: float,
) -> np.ndarray:
    """(M,) bool: which paths are blocked."""
    p = np.where(crosses_obstacle, obstacle_blocked_probability, blocked_probability)
    return u_blocked < p


def measure(
    distance_m: np.ndarray,
    blocked: np.ndarray,
    draws: StandardDraws,
    sigma_m: float,
    sigma_per_m: float,
    blocked_bias_mean_m: float,
) -> np.ndarray:
    """(M,) measured ranges in metres, clipped at 0."""
    noise = sigma_at(distance_m, sigma_m, sigma_per_m) * draws.z
    bias = np.where(blocked, blocked_bias_mean_m * draws.e_bias, 0.0)
    return np.maximum(distance_m + noise + bias, 0.0)
