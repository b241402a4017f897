"""Robust shadows: noisy channel eigenvalues from a calibration shadow of |0...0>.

Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021): measure a known state
with the same ensemble; since <Z_S> = 1 on |0...0> for every Z string, the
mean single-snapshot value <b|U Z_S U^dagger|b> estimates the noisy
eigenvalue of the support S, which then replaces lambda_S. For the local
ensemble with independent readout errors this is one factor per qubit; for
shallow circuits one value per support pattern. The noise is assumed the
same in the calibration and in the experiment, and symmetric enough to be
twirled into a Pauli-diagonal channel (e.g. equal flip probabilities).
"""

from __future__ import annotations

import numpy as np

from manybody.errors import InputError
from manybody.measure.propagation import snapshot_values


class Calibration:
    """Calibrated eigenvalues for the shadows of one ensemble."""

    def __init__(self, shadow):
        self.ensemble = shadow.ensemble
        self.positions, self.bits = shadow.snapshots()
        self.settings = shadow.settings
        self._cache: dict[bytes, float] = {}
        n = self.ensemble.n_qubits
        self.lambda_local = np.array([self._mean_z([q]) for q in range(n)])
        if np.any(self.lambda_local <= 0):
            raise InputError("the calibration shadow gives a non-positive eigenvalue; it is too noisy or not |0...0>")
        self.inv_local = 1.0 / self.lambda_local

    def _mean_z(self, qubits) -> float:
        codes = np.zeros(self.ensemble.n_qubits, dtype=np.uint8)
        codes[list(qubits)] = 2
        key = codes.tobytes()
        if key not in self._cache:
            values = snapshot_values(codes, self.ensemble, self.settings, self.positions, self.bits)
            self._cache[key] = float(values.mean())
        return self._cache[key]

    def eigenvalue(self, support) -> float:
        qubits = np.flatnonzero(np.asarray(support))
        if len(qubits) == 0:
            return 1.0
        if self.ensemble.kind == "local" or self.ensemble.depth == 0:
            return float(np.prod(self.lambda_local[qubits]))
        return self._mean_z(qubits)


def check_same_ensemble(calibration_shadow, shadow, path: str = "the calibration shadow") -> None:
    a, b = calibration_shadow.ensemble, shadow.ensemble
    same = a.kind == b.kind and a.n_qubits == b.n_qubits and a.depth == b.depth
    if same and a.kind == "shallow":
        same = np.array_equal(a.gate_qubits, b.gate_qubits)
    if not same:
        raise InputError(f"{path}: was taken with another ensemble ({a.kind}, depth {a.depth}, {a.n_qubits} qubits) "
                         f"than the shadow ({b.kind}, depth {b.depth}, {b.n_qubits} qubits)")
