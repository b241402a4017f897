"""Overlap tr(rho_1 rho_2) of two shadows against closed forms and dense density matrices."""

import numpy as np
import pytest

import manybody.estimation.overlap as overlap_module
from manybody.errors import InputError
from manybody.estimation.overlap import overlap
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.references import exact
from manybody.simulation.noise import Noise
from tests.helpers import chain, make_shadow, tfim_model, within

N = 4


def ground(n=N):
    return exact.ground_state(tfim_model(n).hamiltonian)[1]


def depolarized(psi, p):
    """prod_q D_q(|psi><psi|), D(rho) = (1 - p) rho + p (I/2) tr_q rho, by numpy on the dense density matrix."""
    n = int(np.log2(len(psi)))
    rho = np.outer(psi, psi.conj()).reshape((2,) * (2 * n))
    for q in range(n):
        traced = np.trace(rho, axis1=q, axis2=n + q)  # tr_q rho, qubit q removed from both index sets
        full = np.expand_dims(np.expand_dims(traced, q), n + q) * np.eye(2).reshape(
            [2 if a in (q, n + q) else 1 for a in range(2 * n)]) / 2
        rho = (1 - p) * rho + p * full
    return rho.reshape(2**n, 2**n)


def ensemble(kind, n=N):
    return {"local": LocalEnsemble(n), "shallow": ShallowEnsemble(n, 2, chain(n)), "global": GlobalEnsemble(n)}[kind]


def check(result, name, value):
    ok, worst = within(result[name].values, result[name + "_err"].values, value)
    assert ok, (name, float(result[name]), float(result[name + "_err"]), value, worst)


@pytest.mark.parametrize("kind", ["local", "shallow", "global"])
def test_same_pure_state_twice(kind):
    # |psi> prepared twice: tr(rho rho) = tr rho^2 = 1 and the normalised overlap is 1 (Elben et al.,
    # PRL 124, 010504 (2020)); two independent shadows of the same state
    psi = ground()
    a = make_shadow(psi, ensemble(kind), 4000, seed=1)
    b = make_shadow(psi, ensemble(kind), 4000, seed=2)
    result = overlap(a, b)
    for name in ("overlap", "normalized_overlap", "purity_a", "purity_b"):
        check(result, name, 1.0)


def test_same_mixed_state_twice_on_a_subsystem():
    # reduced state of qubits 0, 1 of the ground state: the overlap of two copies is tr rho_A^2 (numpy
    # partial trace); the normalised overlap is 1
    psi = ground()
    m = psi.reshape(4, 4)
    rho_a = m @ m.conj().T
    purity = float(np.trace(rho_a @ rho_a).real)
    a = make_shadow(psi, LocalEnsemble(N), 6000, seed=3)
    b = make_shadow(psi, LocalEnsemble(N), 6000, seed=4)
    result = overlap(a, b, qubits=[0, 1])
    check(result, "overlap", purity)
    check(result, "purity_a", purity)
    check(result, "normalized_overlap", 1.0)
    assert result.attrs["qubits"] == "0,1" and result.attrs["method"] == "histogram"


@pytest.mark.parametrize("kind", ["local", "shallow"])
def test_orthogonal_product_states(kind):
    # <0101|1010> = 0: tr(rho_1 rho_2) = |<a|b>|^2 = 0 (a fact of the trade)
    a = make_shadow(exact.product_state("0101"), ensemble(kind), 4000, seed=5)
    b = make_shadow(exact.product_state("1010"), ensemble(kind), 4000, seed=6)
    result = overlap(a, b)
    check(result, "overlap", 0.0)
    check(result, "normalized_overlap", 0.0)


def test_pure_state_and_a_depolarized_copy():
    # local depolarizing with probability p just before a local-basis readout is D^(x n) on the state;
    # tr(psi D(psi)) and tr D(psi)^2 from dense density matrices (numpy); normalised = overlap / 1
    p = 0.3
    psi = ground()
    rho = depolarized(psi, p)
    value = float(np.vdot(psi, rho @ psi).real)
    purity = float(np.trace(rho @ rho).real)
    assert abs(purity - 1) > 0.3 and abs(value - 1) > 0.2  # far from the pure values
    a = make_shadow(psi, LocalEnsemble(N), 6000, seed=7)
    b = make_shadow(psi, LocalEnsemble(N), 6000, seed=8, noise=Noise(depolarizing=p))
    result = overlap(a, b)
    check(result, "overlap", value)
    check(result, "purity_b", purity)
    check(result, "normalized_overlap", value / max(1.0, purity))


def test_pair_counts_equal_histograms(monkeypatch):
    # two exact algorithms for the same sums (docs/design.md section 4.3): equal up to rounding
    psi = ground()
    a = make_shadow(psi, LocalEnsemble(N), 120, shots=5, seed=9)
    b = make_shadow(psi, LocalEnsemble(N), 600, seed=10, noise=Noise(depolarizing=0.2))
    hist = overlap(a, b)
    monkeypatch.setattr(overlap_module, "HISTOGRAM_MAX_SITES", 2)
    pairs = overlap(a, b)
    assert pairs.attrs["method"] == "pair counts"
    for name in hist.data_vars:
        assert np.isclose(float(hist[name]), float(pairs[name]), rtol=1e-9, atol=1e-12), name


def test_several_shots_per_setting_and_mixed_ensembles():
    # a local and a shallow shadow of the same pure state, ten shots per setting: overlap 1
    psi = ground()
    a = make_shadow(psi, LocalEnsemble(N), 500, shots=10, seed=11)
    b = make_shadow(psi, ShallowEnsemble(N, 1, chain(N)), 500, shots=10, seed=12)
    result = overlap(a, b)
    assert result.attrs["method"] == "Pauli vectors"
    check(result, "overlap", 1.0)
    check(result, "normalized_overlap", 1.0)


def test_bad_input():
    psi = ground()
    a = make_shadow(psi, LocalEnsemble(N), 100, seed=1)
    with pytest.raises(InputError, match="same object"):
        overlap(a, a)
    with pytest.raises(InputError, match=r"^qubits \[0, 7\]: give distinct qubit numbers from 0 to 3$"):
        overlap(a, make_shadow(psi, LocalEnsemble(N), 100, seed=2), qubits=[0, 7])
    long_list = r"^qubits \[0, 1, 2, \.\.\., 99\] \(100 given\): give distinct qubit numbers from 0 to 3$"
    with pytest.raises(InputError, match=long_list):  # our own wording: a long list, abridged
        overlap(a, make_shadow(psi, LocalEnsemble(N), 100, seed=2), qubits=range(100))
    with pytest.raises(InputError, match="5 qubits"):
        overlap(a, make_shadow(ground(5), LocalEnsemble(5), 100, seed=2))


def test_circuit_shadows_on_a_subsystem():
    # qubits 1, 2 of the ground state from two depth-1 shadows: tr rho_A^2 by a numpy partial trace
    psi = ground()
    m = np.moveaxis(psi.reshape(2, 2, 2, 2), [1, 2], [0, 1]).reshape(4, 4)
    rho_a = m @ m.conj().T
    purity = float(np.trace(rho_a @ rho_a).real)
    a = make_shadow(psi, ShallowEnsemble(N, 1, chain(N)), 4000, seed=13)
    b = make_shadow(psi, ShallowEnsemble(N, 1, chain(N)), 4000, seed=14)
    result = overlap(a, b, qubits=[2, 1])
    assert result.attrs["qubits"] == "1,2" and result.attrs["method"] == "Pauli vectors"
    check(result, "overlap", purity)
    check(result, "normalized_overlap", 1.0)
