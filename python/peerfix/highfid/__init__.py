"""High-fidelity references for the estimator: what bounded messages cost.

- particle (engine_particle.py): nonparametric belief propagation with
  particle beliefs, float64, on the same network and schedule;
- central (engine_central.py): maximum likelihood over all agents of an
  epoch at once (non-linear least squares).

See docs/reference-engines.md.
"""

from .engine_particle import ParticleEngine, ParticleMessage
from .particles import ParticleBelief, ParticleParams

__all__ = ["ParticleBelief", "ParticleEngine", "ParticleMessage", "ParticleParams"]
