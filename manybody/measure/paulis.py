"""The one table of Pauli letter codes used by every part of manybody.

One-qubit Pauli code: bit 0 is the x bit, bit 1 the z bit, so 0 = I, 1 = X,
2 = Z, 3 = Y (Y = i X Z). A Pauli string is an array of such codes, one per
qubit. Two qubits (a, b) of a gate combine as c_a + 4 c_b (0..15).

Measurement basis (and axis) code: 0 = X, 1 = Y, 2 = Z; ``BASIS_PAULI``
gives the Pauli code measured in each basis, ``AXIS_OF_CODE`` the inverse.
"""

from __future__ import annotations

import itertools

import numpy as np

#: letter of each one-qubit Pauli code
LETTER_OF_CODE = "IXZY"
#: one-qubit Pauli code of each letter
CODE_OF_LETTER = {letter: code for code, letter in enumerate(LETTER_OF_CODE)}
#: letter of each basis (axis) code
BASIS_LETTERS = "XYZ"
#: one-qubit Pauli code measured in each basis code (X 1, Y 3, Z 2)
BASIS_PAULI = np.array([CODE_OF_LETTER[b] for b in BASIS_LETTERS], dtype=np.uint8)
#: axis (basis) code of each non-identity one-qubit Pauli code; -1 for I
AXIS_OF_CODE = np.array([-1, 0, 2, 1], dtype=np.int64)


def pauli_codes(string: str) -> np.ndarray:
    """One-qubit codes of a string over I, X, Y, Z (character q is qubit q)."""
    return np.array([CODE_OF_LETTER[c] for c in string], dtype=np.uint8)


def pauli_string_codes(strings_x: np.ndarray, strings_z: np.ndarray) -> np.ndarray:
    """One-qubit codes from x and z bit rows: (T, n)."""
    return strings_x.astype(np.uint8) + 2 * strings_z.astype(np.uint8)


def paulis_on(qubits, n_qubits: int) -> np.ndarray:
    """All 4^|A| Pauli strings supported in ``qubits``, as codes (4^|A|, n); row 0 is the identity."""
    qubits = list(qubits)
    rows = np.zeros((4 ** len(qubits), n_qubits), dtype=np.uint8)
    for r, letters in enumerate(itertools.product(range(4), repeat=len(qubits))):
        rows[r, qubits] = letters
    return rows


def single_site_codes(qubit: int, axis: int, n_qubits: int) -> np.ndarray:
    """The string with the Pauli of ``axis`` (0 X, 1 Y, 2 Z) on ``qubit`` and identities elsewhere."""
    codes = np.zeros(n_qubits, dtype=np.uint8)
    codes[qubit] = BASIS_PAULI[axis]
    return codes
