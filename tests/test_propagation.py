"""Pauli propagation against dense state-vector algebra and stim's unitaries."""

import numpy as np
import pytest

from hamiltonians.pauli import PauliExpansion
from manybody.clifford import clifford_table
from manybody.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.propagation import pauli_codes, snapshot_values
from manybody.statevector import BASIS_ROTATIONS, embed
from tests.test_ensembles import chain, stim_tableau_of

N = 6
STRINGS = ["XIIIII", "IYZIII", "ZIIIXI", "IXYZXI", "YYYYYY", "IIIZIZ"]


def dense_unitary(ens, settings, k):
    """U of setting k built from the gate unitaries (and stim for global Cliffords)."""
    n = ens.n_qubits
    if ens.kind == "global":
        tab = stim_tableau_of(settings.tableau_x[k], settings.tableau_z[k], settings.tableau_sign[k])
        return tab.to_unitary_matrix(endian="big")
    u = np.eye(2**n, dtype=complex)
    if ens.kind == "shallow":
        table = clifford_table(2)
        for slot, (a, b) in enumerate(ens.gate_qubits.tolist()):
            u = embed(table.unitaries[settings.gates[k, slot]], [a, b], n) @ u
    for q in range(n):
        u = embed(BASIS_ROTATIONS[settings.basis[k, q]], [q], n) @ u
    return u


@pytest.mark.parametrize("ens", [LocalEnsemble(N), ShallowEnsemble(N, 1, chain(N)),
                                 ShallowEnsemble(N, 3, chain(N)), GlobalEnsemble(N)],
                         ids=["local", "shallow1", "shallow3", "global"])
def test_snapshot_values_match_dense(ens):
    rng = np.random.default_rng(21)
    settings = ens.draw(12, rng)
    outcomes = rng.integers(0, 2, size=(12, N), dtype=np.uint8)
    index = np.arange(12)
    weights = 2 ** np.arange(N - 1, -1, -1)
    for s in STRINGS:
        ours = snapshot_values(pauli_codes(s), ens, settings, index, outcomes)
        p = PauliExpansion.from_strings(s).to_dense()
        for k in range(12):
            u = dense_unitary(ens, settings, k)
            b = int(outcomes[k] @ weights)
            ref = (u @ p @ u.conj().T)[b, b]
            assert abs(ref.imag) < 1e-9 and np.isclose(ref.real, ours[k], atol=1e-9)
