"""Ensembles and channel eigenvalues: closed forms and Monte Carlo with stim."""

import numpy as np
import pytest
import stim

from manybody.measure import eigenvalues
from manybody.measure.clifford import clifford_table
from manybody.measure.ensembles import (
    GlobalEnsemble,
    LocalEnsemble,
    ShallowEnsemble,
    edge_layers,
    random_clifford_tableaux,
)
from tests.helpers import STIM_GATE, STIM_TO_CODE, chain, stim_tableau_of

CODE_TO_STIM = {v: k for k, v in STIM_TO_CODE.items()}


def test_depth_zero_is_local():
    # Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020): lambda_P = 3^-|P| for random local bases.
    ens = ShallowEnsemble(6, 0, chain(6))
    for support in ([0], [1, 4], [0, 2, 3, 5]):
        assert ens.eigenvalue(support) == pytest.approx(3.0 ** -len(support))
        assert LocalEnsemble(6).eigenvalue(np.isin(np.arange(6), support)) == pytest.approx(3.0 ** -len(support))


@pytest.mark.parametrize("support", [[0], [1], [0, 1]])
def test_one_gate_gives_global_two_qubit_value(support):
    # One random two-qubit Clifford on the support: 1/(2^2 + 1) = 1/5 (Huang, Kueng, Preskill 2020).
    ens = ShallowEnsemble(2, 1, [(0, 1)])
    assert ens.eigenvalue(support) == pytest.approx(1 / 5)


def test_brickwork_layers():
    layers = edge_layers(6, chain(6))
    assert [l.tolist() for l in layers] == [[[0, 1], [2, 3], [4, 5]], [[1, 2], [3, 4]]]
    ens = ShallowEnsemble(6, 3, chain(6))
    assert ens.gate_layer.tolist() == [0, 0, 0, 1, 1, 2, 2, 2]


def test_edge_colouring_of_square_lattice_is_proper():
    from hamiltonians import build_lattice

    lat = build_lattice("square", [4, 4])
    layers = edge_layers(lat.n_sites, lat.bonds)
    assert sum(len(l) for l in layers) == len(lat.bonds)
    for layer in layers:  # disjoint edges within a layer
        assert len(np.unique(layer)) == layer.size
    assert len(layers) <= 5  # Vizing: at most max degree + 1 colours


def test_dense_and_network_contraction_agree(monkeypatch):
    ens = ShallowEnsemble(10, 3, chain(10))
    key = eigenvalues.support_chain_key([3, 6], ens.layers)
    dense = eigenvalues._contract_dense(*key)
    network = eigenvalues._contract_network(*key)
    assert dense == pytest.approx(network, rel=1e-10)


def circuit_tableau(ens, gates):
    table = clifford_table(2)
    circuit = stim.Circuit()
    circuit.append("I", [ens.n_qubits - 1])
    for slot, (a, b) in enumerate(ens.gate_qubits.tolist()):
        for name, qs in table.words[gates[slot]]:
            circuit.append(STIM_GATE[name], [(a, b)[q] for q in qs])
    return stim.Tableau.from_circuit(circuit)


@pytest.mark.parametrize("n,depth,support", [
    (6, 1, [2, 3]), (6, 2, [1]), (8, 2, [2, 5]), (8, 3, [0, 1, 2]), (10, 4, [4, 5]), (10, 3, [1, 8])])
def test_shallow_eigenvalues_match_stim_monte_carlo(n, depth, support):
    # Monte Carlo over random circuits, propagated by stim: E[3^-|support of U P U^dag|].
    # Bound: 4 standard errors of the Monte-Carlo mean.
    ens = ShallowEnsemble(n, depth, chain(n))
    settings = ens.draw(1500, np.random.default_rng(100 + n + depth))
    pauli = stim.PauliString("".join("X" if q in support else "_" for q in range(n)))
    samples = []
    for gates in settings.gates:
        image = circuit_tableau(ens, gates)(pauli)
        samples.append(3.0 ** -sum(image[q] != 0 for q in range(n)))
    samples = np.array(samples)
    err = samples.std(ddof=1) / np.sqrt(len(samples))
    assert abs(samples.mean() - ens.eigenvalue(support)) < 4 * err


def test_random_tableaux_are_cliffords_with_global_eigenvalue():
    # stim rejects generator images that do not form a Clifford; the fraction of
    # draws that make P Z-type estimates lambda = 1/(2^n + 1) (Huang, Kueng, Preskill 2020),
    # within 4 binomial standard errors.
    n, count = 3, 4000
    tx, tz, sign = random_clifford_tableaux(n, count, np.random.default_rng(7))
    pauli = stim.PauliString("XY_")
    ztype = 0
    for k in range(count):
        image = stim_tableau_of(tx[k], tz[k], sign[k])(pauli)
        ztype += all(image[q] in (0, 3) for q in range(n))
    p = 1 / (2**n + 1)
    assert abs(ztype / count - p) < 4 * np.sqrt(p * (1 - p) / count)
    assert GlobalEnsemble(n).eigenvalue([True, True, False]) == pytest.approx(p)


def test_same_seed_same_settings():
    ens = ShallowEnsemble(8, 2, chain(8))
    a, b = ens.draw(50, 11), ens.draw(50, 11)
    assert np.array_equal(a.gates, b.gates) and np.array_equal(a.basis, b.basis)
    assert not np.array_equal(a.gates, ens.draw(50, 12).gates)
