"""Clifford tables against dense unitaries and against stim."""

import numpy as np
import pytest
import stim

from manybody.measure.clifford import clifford_table, pauli_matrix_2q, word_unitary
from tests.helpers import STIM_GATE, STIM_TO_CODE


def stim_tableau(word, n):
    circuit = stim.Circuit()
    circuit.append("I", [n - 1])  # fixes the qubit count
    for name, qubits in word:
        circuit.append(STIM_GATE[name], list(qubits))
    return stim.Tableau.from_circuit(circuit)


def stim_code(ps, n):
    return sum(STIM_TO_CODE[ps[q]] << (2 * q) for q in range(n))


def test_sizes_and_distinct_tableaux():
    # |C1 / U(1)| = 24 and |C2 / U(1)| = 11520 (facts of the trade).
    for n, size in ((1, 24), (2, 11520)):
        t = clifford_table(n)
        assert len(t) == size
        rows = np.concatenate([t.images, t.signs], axis=1)
        assert len(np.unique(rows, axis=0)) == size


def test_fixed_indices_never_change():
    # Pinned values of the canonical enumeration: a gate index in a file keeps its meaning.
    t = clifford_table(2)
    pinned = {0: ([1, 2, 4, 8], [1, 1, 1, 1]), 1: ([1, 2, 4, 8], [-1, 1, 1, 1]),
              17: ([1, 2, 4, 12], [-1, 1, 1, 1]), 5000: ([7, 8, 3, 9], [1, 1, 1, -1]),
              11519: ([15, 14, 12, 9], [-1, -1, -1, -1])}
    for g, (images, signs) in pinned.items():
        assert t.images[g].tolist() == images and t.signs[g].tolist() == signs
    t1 = clifford_table(1)
    assert t1.images[8].tolist() == [2, 1] and t1.words[8] == (("h", (0,)),)
    assert t1.images[20].tolist() == [3, 2] and t1.words[20] == (("s", (0,)),)


def test_conjugation_table_matches_dense_unitaries():
    t = clifford_table(2)
    paulis = np.array([pauli_matrix_2q(c) for c in range(16)])
    conj = np.einsum("gij,pjk,glk->gpil", t.unitaries, paulis, t.unitaries.conj())
    expected = t.conj_sign[..., None, None] * paulis[t.conj_code]
    assert np.allclose(conj, expected)


@pytest.mark.parametrize("n", [1, 2])
def test_tables_match_stim(n):
    # stim builds the tableau of each gate's decomposition independently of our tables.
    t = clifford_table(n)
    rng = np.random.default_rng(5)
    picks = range(len(t)) if n == 1 else rng.choice(len(t), 1500, replace=False)
    for g in picks:
        tab = stim_tableau(t.words[g], n)
        for q in range(n):
            for j, out in ((2 * q, tab.x_output(q)), (2 * q + 1, tab.z_output(q))):
                assert stim_code(out, n) == t.images[g, j]
                assert out.sign == t.signs[g, j]


def test_words_reproduce_unitaries():
    t = clifford_table(2)
    for g in np.random.default_rng(2).choice(len(t), 300, replace=False):
        u = word_unitary(t.words[g], 2)
        overlap = abs(np.trace(u.conj().T @ t.unitaries[g])) / 4
        assert overlap == pytest.approx(1.0)
