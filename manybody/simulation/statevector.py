"""Dense state-vector kernels (qubit 0 is the most significant bit)."""

from __future__ import annotations

import numpy as np

from manybody.measure.clifford import _H, _S

#: rotation applied before a Z measurement to measure X, Y, Z (docs/design.md section 2):
#: X: H; Y: S^dagger then H; Z: nothing.
BASIS_ROTATIONS = np.array([_H, _H @ _S.conj(), np.eye(2)])


def apply_unitary(psi: np.ndarray, u: np.ndarray, qubits) -> np.ndarray:
    """Apply a k-qubit unitary to ``qubits`` of a state (last axis 2^n; leading axes batch)."""
    qubits = list(qubits)
    k = len(qubits)
    batch = psi.shape[:-1]
    n = int(np.log2(psi.shape[-1]))
    nb = len(batch)
    t = psi.reshape(batch + (2,) * n)
    t = np.tensordot(t, u.reshape((2,) * (2 * k)), axes=([nb + q for q in qubits], list(range(k, 2 * k))))
    # tensordot puts the new axes last: move them back into place
    t = np.moveaxis(t, list(range(t.ndim - k, t.ndim)), [nb + q for q in qubits])
    return t.reshape(psi.shape)


def embed(u: np.ndarray, qubits, n: int) -> np.ndarray:
    """The 2^n x 2^n matrix of a k-qubit unitary acting on ``qubits``."""
    return apply_unitary(np.eye(2**n, dtype=complex), u, qubits).T
