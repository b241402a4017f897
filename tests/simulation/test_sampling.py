"""Snapshot samplers against the Born rule, and against each other."""

import numpy as np
import pytest
import quimb.tensor as qtn
from scipy import stats

from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.simulation import sampling
from tests.helpers import chain, dense_unitary

WEIGHTS = lambda n: 2 ** np.arange(n - 1, -1, -1)  # noqa: E731


def random_state(n, seed):
    rng = np.random.default_rng(seed)
    psi = rng.standard_normal(2**n) + 1j * rng.standard_normal(2**n)
    return psi / np.linalg.norm(psi)


def one_setting(ens, seed):
    return ens.draw(1, np.random.default_rng(seed))


@pytest.mark.parametrize("n,kind", [(4, "local"), (6, "local"), (8, "local"), (5, "shallow"), (6, "shallow")])
def test_born_rule_chi_square(n, kind):
    # Born rule: outcome frequencies in one fixed setting follow |<b|U|psi>|^2
    # (Pearson chi-square, scipy.stats.chisquare; fixed seed, reject below p = 1e-3).
    ens = LocalEnsemble(n) if kind == "local" else ShallowEnsemble(n, 2, chain(n))
    settings = one_setting(ens, n)
    psi = random_state(n, n)
    shots = 20000
    bits = sampling.sample_dense(psi, ens, settings, shots, np.random.default_rng(10 + n))
    counts = np.bincount(bits @ WEIGHTS(n), minlength=2**n)
    probs = np.abs(dense_unitary(ens, settings, 0) @ psi) ** 2
    assert stats.chisquare(counts, shots * probs).pvalue > 1e-3


def test_mps_and_dense_samplers_agree():
    # Same state, same setting: the two samplers' histograms are compatible
    # (chi-square test of homogeneity, scipy.stats.chi2_contingency; reject below p = 1e-3).
    n = 6
    mps = qtn.MPS_rand_state(n, 4, dtype=complex, seed=4)
    psi = np.asarray(mps.to_dense()).ravel()
    psi /= np.linalg.norm(psi)
    for ens in (LocalEnsemble(n), ShallowEnsemble(n, 2, chain(n))):
        settings = one_setting(ens, 3)
        dense = sampling.sample_dense(psi, ens, settings, 20000, np.random.default_rng(1))
        from_mps, lost = sampling.sample_mps(mps, ens, settings, 20000, np.random.default_rng(2))
        assert lost < 1e-12
        table = np.array([np.bincount(dense @ WEIGHTS(n), minlength=2**n),
                          np.bincount(from_mps @ WEIGHTS(n), minlength=2**n)])
        table = table[:, table.sum(axis=0) > 0]
        assert stats.chi2_contingency(table).pvalue > 1e-3


def test_dense_to_tensors_is_exact():
    psi = random_state(7, 1)
    tensors = sampling.dense_to_tensors(psi)
    out = tensors[0][0].T  # (p, r)
    for a in tensors[1:]:
        out = np.einsum("...r,rsp->...ps", out, a)
    assert np.allclose(out.reshape(-1), psi)
    for a in tensors[1:]:  # right-canonical: each tensor is an isometry onto its left bond
        assert np.allclose(np.einsum("lrp,Lrp->lL", a, a.conj()), np.eye(a.shape[0]))


def test_sample_rows_inverse_cdf():
    probs = np.array([[0.0, 1.0, 0.0], [0.5, 0.0, 0.5]])
    idx = sampling.sample_rows(probs, 1000, np.random.default_rng(0))
    assert set(idx[0]) == {1} and set(idx[1]) <= {0, 2}


def test_mps_circuit_application_matches_dense():
    # Gates on near and distant qubits (SWAP routing), no truncation: the MPS
    # equals the dense state-vector result (statevector.apply_unitary) up to a phase.
    from manybody.measure.clifford import clifford_table
    from manybody.simulation.statevector import apply_unitary

    n = 6
    mps = qtn.MPS_rand_state(n, 4, dtype=complex, seed=2)
    psi = np.asarray(mps.to_dense()).ravel()
    psi /= np.linalg.norm(psi)
    table = clifford_table(2)
    rng = np.random.default_rng(0)
    pairs = [(0, 1), (2, 3), (4, 5), (1, 2), (3, 4), (4, 1), (0, 5), (3, 2)]
    gates = [(table.unitaries[rng.integers(len(table))], a, b) for a, b in pairs]
    tensors, lost = sampling.apply_circuit_tensors(sampling.mps_site_tensors(mps), gates, max_bond=64)
    for u, a, b in gates:
        psi = apply_unitary(psi, u, [a, b])
    out = tensors[0][0].T
    for a in tensors[1:]:
        out = np.einsum("...r,rsp->...ps", out, a)
    assert lost == pytest.approx(0.0, abs=1e-14)
    assert abs(np.vdot(out.reshape(-1), psi)) == pytest.approx(1.0)


@pytest.mark.parametrize("n", [1, 2, 4, 6])
def test_clifford_unitary_matches_stim_up_to_a_global_phase(n):
    # stim's Tableau.to_unitary_matrix (big endian) is the reference.
    from manybody.measure.ensembles import GlobalEnsemble
    from manybody.simulation.sampling import clifford_unitary
    from tests.helpers import stim_tableau_of

    st = GlobalEnsemble(n).draw(4, np.random.default_rng(40 + n))
    for k in range(4):
        ours = clifford_unitary(st.tableau_x[k], st.tableau_z[k], st.tableau_sign[k])
        ref = stim_tableau_of(st.tableau_x[k], st.tableau_z[k], st.tableau_sign[k]).to_unitary_matrix(endian="big")
        i = np.unravel_index(np.argmax(np.abs(ref)), ref.shape)
        phase = ours[i] / ref[i]
        assert abs(abs(phase) - 1) < 1e-6
        assert np.allclose(ours, phase * ref, atol=1e-6)
