"""Robust shadows: noisy channel eigenvalues from a calibration shadow of |0...0>.

Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021): measure a known state
with the same ensemble; since <Z_S> = 1 on |0...0> for every Z string, the
mean single-snapshot value <b|U Z_S U^dagger|b> estimates the noisy
eigenvalue of the support S, which then replaces lambda_S. For the local
ensemble with independent readout errors this is one factor per qubit; for
shallow circuits one value per support pattern. The noise is assumed the
same in the calibration and in the experiment, and symmetric enough to be
twirled into a Pauli-diagonal channel (e.g. equal flip probabilities).

The calibration is a finite sample too: ``log_lambda_deviations`` gives the
delete-one-block jackknife deviations of ln lambda_S (blocks of whole
calibration settings) for the supports an estimate divides by (single qubits
for the local ensemble, every support used for circuits), which the
accumulators propagate into their error bars by the delta method
(docs/design.md section 5).
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
        self._deviations: dict[bytes, np.ndarray] = {}
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

    def log_lambda_deviations(self, supports, n_blocks: int = 20) -> np.ndarray:
        """Delete-one-block jackknife deviations of ln lambda_S for support masks (P, n): (B, P).

        Blocks are contiguous runs of whole calibration settings; row b is
        ln lambda_S without block b minus the mean over b, so that
        (B - 1)/B D^T D is the jackknife covariance of the ln lambda_S. Local
        ensemble: single-qubit supports are its parameters (lambda_S is a
        product); circuit ensembles: one value per support, as estimated.
        """
        supports = np.atleast_2d(np.asarray(supports, dtype=bool))
        used, setting = np.unique(self.positions, return_inverse=True)
        b = int(min(n_blocks, len(used)))
        block = setting * b // len(used)
        counts = np.bincount(block, minlength=b).astype(float)
        out = np.empty((b, len(supports)))
        for p, mask in enumerate(supports):
            key = mask.tobytes()
            if key not in self._deviations:
                codes = np.where(mask, 2, 0).astype(np.uint8)
                values = snapshot_values(codes, self.ensemble, self.settings, self.positions, self.bits)
                sums = np.bincount(block, weights=values, minlength=b)
                with np.errstate(invalid="ignore", divide="ignore"):
                    loo = np.log((sums.sum() - sums) / (counts.sum() - counts))
                self._deviations[key] = loo - loo.mean()
            out[:, p] = self._deviations[key]
        return out

    def log_lambda_covariance(self, n_blocks: int = 20) -> np.ndarray:
        """Local ensemble: (n, n) jackknife covariance of ln lambda_q over blocks of calibration settings."""
        d = self.log_lambda_deviations(np.eye(self.ensemble.n_qubits, dtype=bool), n_blocks)
        return (len(d) - 1) / len(d) * d.T @ d

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
