"""Pauli propagation against dense state-vector algebra and stim's unitaries."""

import numpy as np
import pytest
import stim

from hamiltonians.pauli import PauliExpansion
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import pauli_codes
from manybody.measure.propagation import snapshot_values, snapshot_values_many, snapshot_values_windows
from tests.helpers import STIM_GATE, chain, dense_unitary

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


# --------------------------------------------------------- many strings at once
def grid_edges(rows, cols):
    return np.array([(r * cols + c, r * cols + c + 1) for r in range(rows) for c in range(cols - 1)]
                    + [(r * cols + c, (r + 1) * cols + c) for r in range(rows - 1) for c in range(cols)])


def random_strings(n, count, rng, max_weight=4):
    """Strings of weight 0..max_weight on random qubits (near one another half of the time)."""
    codes = np.zeros((count, n), dtype=np.uint8)
    for row in codes[1:]:
        w = rng.integers(1, max_weight + 1)
        start = rng.integers(0, n)
        spread = 4 if rng.random() < 0.5 else n
        qubits = np.unique((start + rng.integers(0, spread, size=w)) % n)
        row[qubits] = rng.integers(1, 4, size=len(qubits))
    return codes


def stim_values(codes, ens, settings, setting_index, outcomes):
    """<b|U P U^dag|b> with U P U^dag from stim's tableau of the setting's standard gates (basis rotations
    included), so that the measured Pauli is Z: value = sign (-1)^(bits on the support) if Z-type, else 0."""
    n = ens.n_qubits
    out = np.zeros((len(setting_index), len(codes)), dtype=np.int8)
    for k in np.unique(setting_index):
        circuit = stim.Circuit()
        for name, qubits in ens.gates(settings, k):
            circuit.append(STIM_GATE[name], list(qubits))
        circuit.append("I", [n - 1])  # every qubit present in the tableau
        tab = stim.Tableau.from_circuit(circuit)
        rows = np.flatnonzero(setting_index == k)
        for s, row in enumerate(codes):
            image = tab(stim.PauliString("".join("_XZY"[c] for c in row)))
            xs, zs = image.to_numpy()
            if xs.any():
                continue
            parity = outcomes[rows][:, zs].astype(np.int64).sum(axis=1) % 2
            out[rows, s] = int(image.sign.real) * (1 - 2 * parity)
    return out


@pytest.mark.parametrize("n,depth,edges", [(70, 3, "chain"), (12, 2, "grid"), (5, 0, "chain")],
                         ids=["chain70-depth3", "grid3x4-depth2", "local5"])
def test_many_strings_match_stim(n, depth, edges):
    # stim propagates each string through the setting's gates independently of our tables; 70 qubits need
    # two 64-bit words per image, the 3 x 4 grid has light cones that are not intervals of qubits.
    rng = np.random.default_rng(5)
    ens = ShallowEnsemble(n, depth, chain(n) if edges == "chain" else grid_edges(3, 4))
    settings = ens.draw(6, rng)
    index = np.repeat(np.arange(6), 3)  # three shots per setting
    outcomes = rng.integers(0, 2, size=(len(index), n), dtype=np.uint8)
    codes = random_strings(n, 40, rng)
    ours = ens.snapshot_values_many(codes, settings, index, outcomes)
    reference = stim_values(codes, ens, settings, index, outcomes)
    assert np.array_equal(ours, reference)
    gates = settings.gates if depth else None
    assert np.array_equal(snapshot_values_windows(codes, settings.basis, gates, ens.gate_qubits, index, outcomes),
                          reference)
    assert np.count_nonzero(ours) > 0


@pytest.mark.parametrize("n,depth", [(6, 1), (64, 3), (130, 2)])
@pytest.mark.parametrize("shots", [1, 3])
def test_many_strings_match_window_propagation(n, depth, shots):
    # The product-of-factors kernel against the full propagation of every string in its window
    # (the direct form; both are checked against stim above), on many more settings and strings.
    rng = np.random.default_rng(n + shots)
    ens = ShallowEnsemble(n, depth, chain(n))
    settings = ens.draw(300, rng)
    index = np.repeat(np.arange(300), shots) if shots > 1 else np.arange(300)
    outcomes = rng.integers(0, 2, size=(len(index), n), dtype=np.uint8)
    codes = random_strings(n, 200, rng)
    for gates, gate_qubits in ((settings.gates, ens.gate_qubits), (None, None)):
        ours = snapshot_values_many(codes, settings.basis, gates, gate_qubits, index, outcomes)
        direct = snapshot_values_windows(codes, settings.basis, gates, gate_qubits, index, outcomes)
        assert np.array_equal(ours, direct)
        assert 100 < np.count_nonzero(ours) < ours.size  # not all invisible, not all visible


def test_repeated_requests_give_fresh_values():
    # the one-site images are kept between calls: other settings with the same layout must not reuse them
    rng = np.random.default_rng(9)
    ens = ShallowEnsemble(8, 2, chain(8))
    codes = random_strings(8, 30, rng)
    for _ in range(3):
        settings = ens.draw(20, rng)
        outcomes = rng.integers(0, 2, size=(20, 8), dtype=np.uint8)
        ours = ens.snapshot_values_many(codes, settings, np.arange(20), outcomes)
        assert np.array_equal(ours, stim_values(codes, ens, settings, np.arange(20), outcomes))
