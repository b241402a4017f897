"""Measurement noise of a synthetic experiment: readout bit flips and depolarizing noise before measurement."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Noise:
    """Readout flips p01 (0 read as 1) and p10 per qubit, and depolarizing probability before measurement.

    Depolarizing a qubit with probability p just before a measurement in
    any basis randomises its outcome with probability p: a symmetric flip
    with probability p / 2.
    """

    p01: np.ndarray | float = 0.0
    p10: np.ndarray | float = 0.0
    depolarizing: float = 0.0

    def is_zero(self) -> bool:
        return not (np.any(self.p01) or np.any(self.p10) or self.depolarizing)

    def apply(self, bits: np.ndarray, rng) -> np.ndarray:
        if self.is_zero():
            return bits
        n = bits.shape[1]
        half = self.depolarizing / 2
        flip0 = np.broadcast_to(np.asarray(self.p01, dtype=float), (n,))
        flip1 = np.broadcast_to(np.asarray(self.p10, dtype=float), (n,))
        # depolarizing flip, then readout flip: combined flip probability per true bit
        p_one = np.where(bits == 1, 1 - half, half)  # probability the pre-readout bit is 1
        u = rng.random(bits.shape)
        pre = (u < p_one).astype(np.uint8)
        u = rng.random(bits.shape)
        flip = np.where(pre == 1, u < flip1, u < flip0)
        return (pre ^ flip).astype(np.uint8)

    def describe(self) -> dict:
        return {"readout_p01": np.atleast_1d(self.p01).tolist(), "readout_p10": np.atleast_1d(self.p10).tolist(),
                "depolarizing": float(self.depolarizing)}
