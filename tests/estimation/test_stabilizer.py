"""Purities from the stabilizer groups of Clifford snapshots (manybody.estimation.stabilizer).

Checks: group elements and signs against dense linear algebra (numpy, with
stim's unitaries for global Cliffords); the partial sums against the plain
4^|A| enumeration of snapshot values; restriction to subsystems; and physics:
GHZ, cluster and Haar-random states, estimated from shallow and global shadows
and compared with exact reduced density matrices.
"""

import numpy as np
import pytest

from hamiltonians.pauli import PauliExpansion
from manybody.estimation.stabilizer import (
    add_sums,
    group_elements,
    pauli_keys,
    pauli_vector_sums,
    purities_from_sums,
    restrict,
    subgroup_on,
    subsystem_purities,
    support_eigenvalues,
    support_products,
    walsh_hadamard,
)
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import LETTER_OF_CODE, paulis_on
from tests.helpers import chain, dense_unitary, make_shadow, within

ENSEMBLES = {
    "local": lambda n: LocalEnsemble(n),
    "shallow1": lambda n: ShallowEnsemble(n, 1, chain(n)),
    "shallow2": lambda n: ShallowEnsemble(n, 2, chain(n)),
    "shallow3": lambda n: ShallowEnsemble(n, 3, chain(n)),
    "global": lambda n: GlobalEnsemble(n),
}


# ------------------------------------------------------------------ helpers
def enumerated_vectors(ens, settings, pos, bits, qubits):
    """v_i(P) = <b|U P U^dag|b> / lambda_P for all 4^|A| Paulis on A (the plain enumeration)."""
    codes = paulis_on(qubits, ens.n_qubits)
    v = np.ones((len(pos), len(codes)))
    for r in range(1, len(codes)):
        v[:, r] = ens.snapshot_values(codes[r], settings, pos, bits) / ens.eigenvalue(codes[r] != 0)
    return v


def reduced_purity(psi, qubits):
    """tr rho_A^2 of a dense state (qubit 0 = most significant bit), from the smaller Gram matrix."""
    n = int(np.log2(len(psi)))
    rest = [q for q in range(n) if q not in set(qubits)]
    m = np.transpose(psi.reshape((2,) * n), list(qubits) + rest).reshape(2 ** len(qubits), -1)
    if m.shape[0] > m.shape[1]:
        m = m.T  # rho_A and the complement's rho share their nonzero spectrum
    gram = np.einsum("ik,jk->ij", m, m.conj())  # small: numpy's own loop, no threaded BLAS start-up
    return float(np.real(np.vdot(gram, gram)))


def block_sums(shadow, qubits, n_blocks, eigenvalue=None):
    """Partial sums per block of whole settings (contiguous runs of settings)."""
    ens = shadow.ensemble
    pos, bits = shadow.snapshots()
    table = support_eigenvalues(eigenvalue or ens.eigenvalue, ens.n_qubits, qubits)
    block = pos * n_blocks // len(shadow.settings)
    return [pauli_vector_sums(ens, shadow.settings, pos[block == b], bits[block == b], None, qubits, table)
            for b in range(n_blocks)]


def jackknife_purities(parts):
    """Purities of every subsystem of A (index: support pattern) and their delete-one-block jackknife errors.

    Leave-one-block-out sums from the block partial sums: |V - V_b|^2 per support
    pattern = |V|^2 - 2 V.V_b + |V_b|^2 (Efron, The Jackknife, the Bootstrap and
    Other Resampling Plans (1982), from memory: var = (B-1)/B sum (theta_b - mean)^2).
    """
    full = parts[0]
    for p in parts[1:]:
        full = add_sums(full, p)
    several = full.shots.max() > 1

    def diag(s):
        return s.within_by_support if several else s.self_by_support

    vv = support_products(full)
    n, n2 = full.n_snapshots, float(np.sum(full.shots**2))
    loo = []
    for p in parts:
        vv_b = vv - 2 * support_products(full, p) + support_products(p)
        nb, n2b = p.n_snapshots, float(np.sum(p.shots**2))
        loo.append(purities_from_sums(vv_b, diag(full) - diag(p), (n - nb) ** 2 - (n2 - n2b)))
    loo = np.array(loo)
    b = len(parts)
    err = np.sqrt((b - 1) / b * np.sum((loo - loo.mean(axis=0)) ** 2, axis=0))
    return subsystem_purities(full), err


def pattern_of(sub, qubits):
    return sum(1 << list(qubits).index(q) for q in sub)


# ------------------------------------------------------------------ algebra
@pytest.mark.parametrize("name", list(ENSEMBLES))
def test_group_elements_match_dense_traces(name):
    """tr(P rho) for every Pauli P on A: s_e (-1)^(e.beta) on G_A, zero elsewhere (dense numpy/stim reference)."""
    n, qubits = 5, [0, 2, 3]
    ens = ENSEMBLES[name](n)
    rng = np.random.default_rng(5)
    settings = ens.draw(6, rng)
    outcomes = rng.integers(0, 2, size=(6, n), dtype=np.uint8)
    group = subgroup_on(ens, settings, qubits)
    codes_on_a = paulis_on(range(len(qubits)), len(qubits))
    weights = 2 ** np.arange(n - 1, -1, -1)
    for k in range(6):
        u = dense_unitary(ens, settings, k)
        b = int(outcomes[k] @ weights)
        rho = np.outer(u.conj().T[:, b], u[b])  # U^dag |b><b| U
        r = group.rank[k]
        elements, signs = group_elements(group.codes[k:k + 1, :r], group.signs[k:k + 1, :r])
        keys, _ = pauli_keys(elements[0])
        beta = (group.masks[k, :r] @ outcomes[k]) % 2
        parity = np.array([sum(int(beta[g]) for g in range(r) if e >> g & 1) % 2 for e in range(2**r)])
        expected = dict(zip(keys.tolist(), (signs[0] * (1 - 2 * parity)).tolist()))
        for row, code in enumerate(codes_on_a):
            full = np.zeros(n, dtype=np.uint8)
            full[qubits] = code
            p = PauliExpansion.from_strings("".join(LETTER_OF_CODE[c] for c in full)).to_dense()
            value = np.trace(p @ rho)
            assert abs(value - expected.get(row, 0)) < 1e-5, (k, row)  # stim unitaries are complex64


def test_walsh_hadamard_matches_matrix():
    """The fast transform equals the Sylvester Hadamard matrix (scipy.linalg.hadamard)."""
    from scipy.linalg import hadamard

    h = np.random.default_rng(0).integers(0, 9, size=(3, 16)).astype(float)
    assert np.allclose(walsh_hadamard(h), h @ hadamard(16).T)


@pytest.mark.parametrize("shots", [1, 4])
@pytest.mark.parametrize("name", ["shallow1", "shallow2", "shallow3", "global"])
def test_sums_agree_with_enumeration(name, shots):
    """V, sum_i |v_i|^2, sum_s |V_s|^2 and the purity agree with the 4^|A| enumeration, |A| = 2..6."""
    n = 8
    ens = ENSEMBLES[name](n)
    rng = np.random.default_rng(11)
    settings = ens.draw(40, rng)
    pos = np.repeat(np.arange(40), shots)
    bits = rng.integers(0, 2, size=(len(pos), n), dtype=np.uint8)
    for qubits in ([2, 3], [0, 4, 7], [1, 2, 5, 6], [0, 1, 2, 3, 4], [2, 3, 4, 5, 6, 7]):
        a = len(qubits)
        v = enumerated_vectors(ens, settings, pos, bits, qubits)
        per_setting = np.zeros((40, 4**a))
        np.add.at(per_setting, pos, v)
        ours = pauli_vector_sums(ens, settings, pos, bits, None, qubits, ens.eigenvalue)
        assert np.allclose(ours.values, v.sum(axis=0), rtol=1e-12, atol=1e-9)
        assert np.isclose(ours.self_by_support.sum(), np.sum(v * v), rtol=1e-12)
        assert np.allclose(ours.within_per_setting, np.sum(per_setting**2, axis=1), rtol=1e-12)
        big_v = v.sum(axis=0)
        if shots == 1:
            ref = (big_v @ big_v - np.sum(v * v)) / (2**a * len(pos) * (len(pos) - 1))
        else:
            ref = (big_v @ big_v - np.sum(per_setting**2)) / (2**a * (len(pos) ** 2 - 40 * shots**2))
        assert np.isclose(subsystem_purities(ours)[-1], ref, rtol=1e-10, atol=1e-12)
        # the sparse form holds the same numbers
        sparse = pauli_vector_sums(ens, settings, pos, bits, None, qubits, ens.eigenvalue, dense_max_qubits=0)
        assert np.allclose(ours.values[sparse.keys], sparse.values)
        assert np.allclose(np.delete(ours.values, sparse.keys), 0.0, atol=1e-9)
        assert np.allclose(subsystem_purities(sparse), subsystem_purities(ours))


@pytest.mark.parametrize("name", ["shallow2", "global"])
def test_chunks_add_up_and_restriction_equals_direct(name):
    """Sums over chunks of whole settings add up; V restricted to B equals V computed on B directly."""
    n, qubits = 7, [1, 2, 3, 5, 6]
    ens = ENSEMBLES[name](n)
    rng = np.random.default_rng(3)
    settings = ens.draw(30, rng)
    pos = np.repeat(np.arange(30), 3)
    bits = rng.integers(0, 2, size=(len(pos), n), dtype=np.uint8)
    whole = pauli_vector_sums(ens, settings, pos, bits, None, qubits, ens.eigenvalue)
    first, second = pos < 17, pos >= 17
    parts = add_sums(pauli_vector_sums(ens, settings, pos[first], bits[first], None, qubits, ens.eigenvalue),
                     pauli_vector_sums(ens, settings, pos[second], bits[second], None, qubits, ens.eigenvalue))
    assert np.allclose(parts.values, whole.values)
    assert np.allclose(subsystem_purities(parts), subsystem_purities(whole))
    with pytest.raises(ValueError, match="split"):
        add_sums(whole, whole)
    # records with shot counts give the same sums as one row per shot
    rows, counts = np.unique(np.column_stack([pos, bits]), axis=0, return_counts=True)
    counted = pauli_vector_sums(ens, settings, rows[:, 0], rows[:, 1:].astype(np.uint8), counts, qubits,
                                ens.eigenvalue)
    assert np.allclose(counted.values, whole.values)
    assert np.allclose(counted.within_by_support, whole.within_by_support)
    assert np.allclose(counted.self_by_support, whole.self_by_support)
    purities = subsystem_purities(whole)
    for sub in ([2], [1, 6], [2, 3, 5], [1, 2, 3, 6]):
        direct = pauli_vector_sums(ens, settings, pos, bits, None, sub, ens.eigenvalue)
        _, restricted = restrict(whole.keys, whole.values, qubits, sub)
        assert np.allclose(restricted, direct.values)
        assert np.isclose(purities[pattern_of(sub, qubits)], subsystem_purities(direct)[-1])
        sparse = pauli_vector_sums(ens, settings, pos, bits, None, qubits, ens.eigenvalue, dense_max_qubits=0)
        keys, values = restrict(sparse.keys, sparse.values, qubits, sub, dense_max_qubits=0)
        assert np.allclose(direct.values[keys], values)


def test_batches_and_sparse_merges_do_not_change_the_sums(monkeypatch):
    """Small element batches and frequent sparse merges give the same sums as one pass."""
    from manybody.estimation import stabilizer

    n, qubits = 9, [1, 2, 3, 4, 6, 7]
    ens = ShallowEnsemble(n, 2, chain(n))
    rng = np.random.default_rng(8)
    settings = ens.draw(200, rng)
    pos = np.repeat(np.arange(200), 2)
    bits = rng.integers(0, 2, size=(len(pos), n), dtype=np.uint8)
    whole = pauli_vector_sums(ens, settings, pos, bits, None, qubits, ens.eigenvalue)
    monkeypatch.setattr(stabilizer, "ELEMENT_BATCH", 64)
    monkeypatch.setattr(stabilizer, "SPARSE_PENDING", 100)
    small = pauli_vector_sums(ens, settings, pos, bits, None, qubits, ens.eigenvalue, dense_max_qubits=0)
    assert np.allclose(whole.values[small.keys], small.values)
    assert np.allclose(whole.within_by_support, small.within_by_support)
    assert np.allclose(whole.within_per_setting, small.within_per_setting)


def test_local_ensemble_generators_are_the_measured_paulis():
    """Local ensemble: G_A is generated by the measured Pauli of each qubit of A, with mask on that qubit."""
    n, qubits = 6, [0, 3, 4]
    ens = LocalEnsemble(n)
    settings = ens.draw(10, np.random.default_rng(2))
    group = subgroup_on(ens, settings, qubits)
    assert np.all(group.rank == 3) and np.all(group.signs == 1)
    measured = np.array([1, 3, 2])[settings.basis[:, qubits]]  # X, Y, Z codes
    found = np.sort(group.codes.max(axis=2), axis=1)
    assert np.array_equal(found, np.sort(measured, axis=1))
    assert np.array_equal(group.masks.sum(axis=1)[:, qubits], np.ones((10, 3)))


# ------------------------------------------------------------------ physics
def ghz(n):
    psi = np.zeros(2**n, dtype=complex)
    psi[0] = psi[-1] = 1 / np.sqrt(2)
    return psi


def cluster_chain(n):
    """prod_i CZ_(i,i+1) |+>^n on an open chain."""
    bits = (np.arange(2**n)[:, None] >> np.arange(n - 1, -1, -1)) & 1
    phase = np.sum(bits[:, :-1] & bits[:, 1:], axis=1)
    return (-1.0) ** phase / np.sqrt(2**n)


# global: ~35 s of dense sampling (gate-by-gate Cliffords), so slow; shallow2 is its fast sibling
@pytest.mark.parametrize("name", ["shallow2", pytest.param("global", marks=pytest.mark.slow)])
def test_ghz_every_half_cut_has_renyi_entropy_ln2(name):
    """GHZ on 6 qubits: S2 = ln 2 across every half-system cut (fact of the trade: any proper
    subsystem holds (|0..0><0..0| + |1..1><1..1|)/2). The 3-qubit subsystems of A = qubits 0..4
    are one side of each of the 10 cuts; all come from one Pauli vector on A."""
    n, qubits = 6, [0, 1, 2, 3, 4]
    ens = ENSEMBLES[name](n)
    psi = ghz(n)
    shadow = make_shadow(psi, ens, 2000, shots=8, seed=7)
    est, err = jackknife_purities(block_sums(shadow, qubits, 20))
    halves = [p for p in range(32) if p.bit_count() == 3]
    for p in halves:
        assert np.isclose(reduced_purity(psi, [q for t, q in enumerate(qubits) if p >> t & 1]), 0.5)
    ok, worst = within(-np.log(est[halves]), err[halves] / est[halves], np.full(10, np.log(2)), blocks=20)
    assert ok, worst
    assert np.isclose(est[0], 1.0)  # the empty subsystem: tr rho = 1 exactly


@pytest.mark.parametrize("n_settings, shots", [(2000, 10), (20000, 1)])
def test_cluster_chain_entropy_counts_cut_boundaries(n_settings, shots):
    """1D cluster state: S2 = ln 2 per boundary of a contiguous block of >= 2 qubits (common practice,
    from the stabilizer rank: each cut bond removes one stabilizer from the block's group)."""
    n, qubits = 8, [0, 1, 2, 3, 4]
    psi = cluster_chain(n)
    blocks = [list(range(i, j)) for i in range(5) for j in range(i + 2, 6)]
    rule = np.array([np.log(2) * ((b[0] > 0) + (b[-1] < n - 1)) for b in blocks])
    exact = np.array([-np.log(reduced_purity(psi, b)) for b in blocks])
    assert np.allclose(exact, rule)
    shadow = make_shadow(psi, ShallowEnsemble(n, 1, chain(n)), n_settings, shots=shots, seed=4)
    est, err = jackknife_purities(block_sums(shadow, qubits, 20))
    index = [pattern_of(b, qubits) for b in blocks]
    ok, worst = within(est[index], err[index], np.exp(-rule), blocks=20)
    assert ok, worst


def haar_state(n, rng):
    """A normalised complex Gaussian vector is Haar distributed (fact of the trade)."""
    v = rng.normal(size=2**n) + 1j * rng.normal(size=2**n)
    return v / np.linalg.norm(v)


def lubkin_mean_purity(d_a, d_b):
    """E tr rho_A^2 = (d_A + d_B) / (d_A d_B + 1) for Haar states (Lubkin, J. Math. Phys. 19, 1028 (1978), from memory)."""
    return (d_a + d_b) / (d_a * d_b + 1)


@pytest.mark.parametrize("n, a", [(8, 4), (12, 8)])
def test_haar_exact_purities_follow_lubkin(n, a):
    """Our exact reference (dense reduced density matrix) averages to Lubkin's mean over Haar states."""
    rng = np.random.default_rng(1978)
    values = np.array([reduced_purity(haar_state(n, rng), list(range(a))) for _ in range(400)])
    mean, sem = values.mean(), values.std(ddof=1) / np.sqrt(len(values))
    assert abs(mean - lubkin_mean_purity(2**a, 2 ** (n - a))) < 4 * sem


def _haar_shadow_check(n, qubits, n_settings, shots):
    psi = haar_state(n, np.random.default_rng(28))
    shadow = make_shadow(psi, ShallowEnsemble(n, 3, chain(n)), n_settings, shots=shots, seed=29)
    est, err = jackknife_purities(block_sums(shadow, qubits, 20))
    exact = reduced_purity(psi, qubits)
    assert abs(est[-1] - exact) < 4 * err[-1], (est[-1], exact, err[-1])
    assert err[-1] < 0.5 * exact  # the check has teeth: the error bar resolves the purity


def test_haar_shallow_shadow_purity_small():
    """Fast sibling: a 4-qubit subsystem of a Haar-random 8-qubit state, depth-3 shallow shadows."""
    _haar_shadow_check(8, [2, 3, 4, 5], 2000, 10)


@pytest.mark.slow
def test_haar_shallow_shadow_purity_twelve_qubits():
    """An 8-qubit subsystem of a Haar-random 12-qubit state from depth-3 shallow shadows: estimate
    within 4 jackknife error bars of the exact purity."""
    _haar_shadow_check(12, list(range(2, 10)), 20000, 10)
