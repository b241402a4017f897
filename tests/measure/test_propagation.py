"""Pauli propagation against dense state-vector algebra and stim's unitaries."""

import numpy as np
import pytest

from hamiltonians.pauli import PauliExpansion
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import pauli_codes
from manybody.measure.propagation import snapshot_values
from tests.helpers import chain, dense_unitary

N = 6
STRINGS = ["XIIIII", "IYZIII", "ZIIIXI", "IXYZXI", "YYYYYY", "IIIZIZ"]


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
