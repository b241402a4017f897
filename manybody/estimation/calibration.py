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

    #: blocks of whole calibration settings for the jackknife of ln lambda
    BLOCKS = 20

    def __init__(self, shadow):
        self.ensemble = shadow.ensemble
        self.positions, self.bits = shadow.snapshots()
        self.settings = shadow.settings
        used, setting = np.unique(self.positions, return_inverse=True)
        n_blocks = int(min(self.BLOCKS, len(used)))
        self.block = setting * n_blocks // len(used)  # contiguous runs of whole settings
        self.block_counts = np.bincount(self.block, minlength=n_blocks).astype(float)
        self._block_sums: dict[bytes, np.ndarray] = {}
        self.lambda_local = self.inv_local = None
        if self.ensemble.is_local:  # one factor per qubit (independent readout errors)
            n = self.ensemble.n_qubits
            self.lambda_local = np.array([self._mean_z(np.eye(n, dtype=bool)[q]) for q in range(n)])
            self.inv_local = 1.0 / self.lambda_local

    def _sums(self, mask) -> np.ndarray:
        """Per-block sums of the snapshot values of Z on the support ``mask`` (one propagation per support)."""
        key = mask.tobytes()
        if key not in self._block_sums:
            codes = np.where(mask, 2, 0).astype(np.uint8)
            values = snapshot_values(codes, self.ensemble, self.settings, self.positions, self.bits)
            self._block_sums[key] = np.bincount(self.block, weights=values, minlength=len(self.block_counts))
        return self._block_sums[key]

    def _mean_z(self, mask) -> float:
        value = float(self._sums(mask).sum() / self.block_counts.sum())
        if not value > 0:
            raise InputError(f"the calibration shadow gives a non-positive eigenvalue ({value:.3g}) for Z on "
                             f"qubits {np.flatnonzero(mask).tolist()}; it is too noisy, too small or not of |0...0>")
        return value

    def log_lambda_deviations(self, supports) -> np.ndarray:
        """Delete-one-block jackknife deviations of ln lambda_S for support masks (P, n): (B, P).

        Row b is ln lambda_S without block b (of BLOCKS runs of whole
        calibration settings) minus the mean over b, so that (B - 1)/B D^T D
        is the jackknife covariance of the ln lambda_S. Local ensemble:
        single-qubit supports are its parameters (lambda_S is a product);
        circuit ensembles: one value per support, as estimated.
        """
        supports = np.atleast_2d(np.asarray(supports, dtype=bool))
        counts = self.block_counts
        out = np.empty((len(counts), len(supports)))
        for p, mask in enumerate(supports):
            sums = self._sums(mask)
            with np.errstate(invalid="ignore", divide="ignore"):
                loo = np.log((sums.sum() - sums) / (counts.sum() - counts))
            out[:, p] = loo - loo.mean()
        return out

    def eigenvalue(self, support) -> float:
        qubits = np.flatnonzero(np.asarray(support))
        if len(qubits) == 0:
            return 1.0
        if self.ensemble.is_local:
            return float(np.prod(self.lambda_local[qubits]))
        return self._mean_z(np.asarray(support, dtype=bool))


def check_same_ensemble(calibration_shadow, shadow, path: str = "the calibration shadow") -> None:
    a, b = calibration_shadow.ensemble, shadow.ensemble
    if not a.same_as(b):
        raise InputError(f"{path}: was taken with another ensemble ({a.kind}, depth {a.depth}, {a.n_qubits} qubits) "
                         f"than the shadow ({b.kind}, depth {b.depth}, {b.n_qubits} qubits)")
