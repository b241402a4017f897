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
    """Calibrated eigenvalues for the shadows of one ensemble.

    Local ensembles: one factor per qubit, lambda_S = prod_q lambda_q. Circuit
    ensembles (shallow, global): one value per support, the calibration mean
    of the snapshot values of Z on that support.
    """

    def __init__(self, shadow):
        self.ensemble = shadow.ensemble
        self.positions, self.bits = shadow.snapshots()
        self.settings = shadow.settings
        self._cache: dict[bytes, float] = {}
        self.lambda_local = self.inv_local = None
        if self.ensemble.is_local:  # one factor per qubit (independent readout errors)
            n = self.ensemble.n_qubits
            self.lambda_local = np.array([self._mean_z([q]) for q in range(n)])
            self.inv_local = 1.0 / self.lambda_local

    def _mean_z(self, qubits) -> float:
        codes = np.zeros(self.ensemble.n_qubits, dtype=np.uint8)
        codes[list(qubits)] = 2
        key = codes.tobytes()
        if key not in self._cache:
            values = snapshot_values(codes, self.ensemble, self.settings, self.positions, self.bits)
            value = float(values.mean())
            if not value > 0:
                raise InputError(f"the calibration shadow gives a non-positive eigenvalue ({value:.3g}) for Z on "
                                 f"qubits {list(qubits)}; it is too noisy, too small or not of |0...0>")
            self._cache[key] = value
        return self._cache[key]

    def eigenvalue(self, support) -> float:
        qubits = np.flatnonzero(np.asarray(support))
        if len(qubits) == 0:
            return 1.0
        if self.ensemble.is_local:
            return float(np.prod(self.lambda_local[qubits]))
        return self._mean_z(qubits)


def check_same_ensemble(calibration_shadow, shadow, path: str = "the calibration shadow") -> None:
    a, b = calibration_shadow.ensemble, shadow.ensemble
    if not a.same_as(b):
        raise InputError(f"{path}: was taken with another ensemble ({a.kind}, depth {a.depth}, {a.n_qubits} qubits) "
                         f"than the shadow ({b.kind}, depth {b.depth}, {b.n_qubits} qubits)")
