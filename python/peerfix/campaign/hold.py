"""A receiver that holds the last broadcast it heard from each neighbour.

The driver hands an agent only what reached it in this iteration, so with a
lossy channel a tag hears a different, smaller set of neighbours every
iteration and its estimate jumps about (the packet-loss and convergence
studies show it).  Holding each neighbour's last heard broadcast, and using it
when this iteration's is lost, removes that noise on a static network.

This wrapper shows the fix in the campaigns without touching the engines or
the driver; the held messages are dropped at every new epoch (predict), since
their ranges are stale by then.  A sender that stops speaking (censored) is
also held: on a static network a belief rarely stops being informative.
"""

from __future__ import annotations

from ..engine import Inbound


class HoldLastHeard:
    """Wraps an engine; everything but update() and predict() goes to it unchanged."""

    def __init__(self, engine):
        self._engine = engine
        self._heard: dict[str, dict[str, Inbound]] = {}

    def __getattr__(self, name):  # name, broadcast, report, frames_rejected, ...
        return getattr(self._engine, name)

    def update(self, agent_id: str, inbox: list[Inbound]) -> None:
        heard = self._heard.setdefault(agent_id, {})
        fresh = {m.sender for m in inbox}
        held = [m for sender, m in heard.items() if sender not in fresh]
        heard.update((m.sender, m) for m in inbox)
        self._engine.update(agent_id, list(inbox) + held)

    def predict(self, agent_id: str, dt_s: float, process_var_m2_per_s: float) -> None:
        self._heard.pop(agent_id, None)
        self._engine.predict(agent_id, dt_s, process_var_m2_per_s)
