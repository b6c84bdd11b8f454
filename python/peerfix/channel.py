"""The radio between nodes: packet loss and bit errors on each delivery.

Every time a receiver takes a broadcast off the air, the channel may lose it
(probability `loss_probability`, independently per sender, receiver and
iteration) or flip bits in it (each bit independently with probability
`bit_error_rate`; only frames of bytes can be corrupted).  A corrupted frame
is still delivered: catching it is the receiver's job (the frame's check
sequence).  Seeded, so a run is reproducible.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class ChannelCounts:
    delivered: int = 0  # handed to a receiver (corrupted or not)
    lost: int = 0
    corrupted: int = 0  # delivered with at least one flipped bit


@dataclass
class Channel:
    loss_probability: float = 0.0
    bit_error_rate: float = 0.0
    seed: int = 0
    counts: ChannelCounts = field(default_factory=ChannelCounts)

    def __post_init__(self):
        if not 0.0 <= self.loss_probability <= 1.0:
            raise ValueError("loss_probability must be in [0, 1]")
        if not 0.0 <= self.bit_error_rate <= 1.0:
            raise ValueError("bit_error_rate must be in [0, 1]")
        self._rng = np.random.default_rng(self.seed)

    @property
    def ideal(self) -> bool:
        return self.loss_probability == 0.0 and self.bit_error_rate == 0.0

    def deliver(self, message):
        """The message as this receiver hears it, or None when it is lost."""
        if self.loss_probability and self._rng.random() < self.loss_probability:
            self.counts.lost += 1
            return None
        if self.bit_error_rate:
            if not isinstance(message, (bytes, bytearray)):
                raise TypeError("bit errors need messages as bytes (the fixed engine on the air)")
            flips = self._rng.random(len(message) * 8) < self.bit_error_rate
            if flips.any():
                bits = np.unpackbits(np.frombuffer(bytes(message), np.uint8), bitorder="little")
                message = np.packbits(bits ^ flips, bitorder="little").tobytes()
                self.counts.corrupted += 1
        self.counts.delivered += 1
        return message
