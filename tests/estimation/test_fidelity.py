"""Fidelity to a target state from classical shadows (manybody.estimation.fidelity)."""

import itertools

import numpy as np
import pytest
import quimb.tensor as qtn

from manybody.errors import InputError
from manybody.estimation import fidelity as fid
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, Settings, ShallowEnsemble
from manybody.simulation.sampling import rotate_dense
from tests.helpers import chain, dense_unitary, make_shadow


def random_state(n, seed):
    rng = np.random.default_rng(seed)
    psi = rng.normal(size=2**n) + 1j * rng.normal(size=2**n)
    return psi / np.linalg.norm(psi)


def ghz(n):
    psi = np.zeros(2**n, dtype=complex)
    psi[0] = psi[-1] = 2**-0.5
    return psi


def product(word):
    """Product state of a word over 0, 1, +, -."""
    one = {"0": [1, 0], "1": [0, 1], "+": [2**-0.5, 2**-0.5], "-": [2**-0.5, -(2**-0.5)]}
    psi = np.ones(1)
    for c in word:
        psi = np.kron(psi, one[c])
    return psi.astype(complex)


def mean_and_error(f):
    """Mean and standard error over snapshots (one shot per setting: independent snapshots)."""
    return f.mean(), f.std(ddof=1) / np.sqrt(len(f))


def born_probabilities(rho_state, ens, settings):
    states = np.broadcast_to(rho_state, (len(settings), len(rho_state))).copy()
    return np.abs(rotate_dense(states, ens, settings, 0)) ** 2


# ------------------------------------------------------- exact unbiasedness by enumeration
def test_local_estimator_is_exactly_unbiased_over_all_bases():
    # E[M^-1(U^dag|b><b|U)] = rho (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020)): averaged
    # exactly over all 3^n bases and 2^n outcomes with Born weights, f gives |<psi|chi>|^2.
    n = 3
    psi, chi = random_state(n, 1), random_state(n, 2)
    bases = np.array(list(itertools.product(range(3), repeat=n)), dtype=np.uint8)
    ens = LocalEnsemble(n)
    settings = Settings(np.arange(len(bases)), basis=bases)
    probs = born_probabilities(chi, ens, settings)
    outcomes = np.array(list(itertools.product(range(2), repeat=n)), dtype=np.uint8)
    basis_rows = np.repeat(bases, 2**n, axis=0)
    bits = np.tile(outcomes, (len(bases), 1))
    exact = abs(np.vdot(psi, chi)) ** 2
    f_dense = fid.local_fidelity_dense(psi, basis_rows, bits)
    f_mps = fid.local_fidelity_mps(qtn.MatrixProductState.from_dense(psi, [2] * n), basis_rows, bits)
    f_table = fid.outcome_table(psi, ens, settings).ravel()
    for f in (f_dense, f_mps, f_table):
        assert np.sum(probs.ravel() * f) / len(bases) == pytest.approx(exact, abs=1e-12)
    assert np.allclose(f_dense, f_table, atol=1e-12)


@pytest.mark.parametrize("n", [2, 3])
def test_shallow_estimator_is_exactly_unbiased_over_all_two_qubit_cliffords(n):
    # Same unbiasedness fact, now for one random two-qubit Clifford on qubits (0, 1) then random
    # bases: the average over all 11520 Cliffords (the exact ensemble) and all bases is exact.
    psi, chi = random_state(n, 3), random_state(n, 4)
    ens = ShallowEnsemble(n, 1, chain(n))
    assert ens.gate_qubits.tolist() == [[0, 1]]
    bases = np.array(list(itertools.product(range(3), repeat=n)), dtype=np.uint8)
    gates = np.repeat(np.arange(11520, dtype=np.uint16), len(bases))[:, None]
    settings = Settings(np.arange(len(gates)), basis=np.tile(bases, (11520, 1)), gates=gates)
    probs = born_probabilities(chi, ens, settings)
    table = fid.outcome_table(psi, ens, settings)
    assert np.sum(probs * table) / len(gates) == pytest.approx(abs(np.vdot(psi, chi)) ** 2, abs=1e-12)


def test_stabilizer_supports_match_dense_conjugation():
    # U^dag Z^z U from dense matrices (gate unitaries of the Clifford table); its support is read
    # off its Pauli decomposition, tr(P Q) / 2^n (definition of the Pauli basis).
    n = 3
    ens = ShallowEnsemble(n, 2, chain(n))
    settings = ens.draw(4, np.random.default_rng(5))
    supports = fid.stabilizer_supports(ens, settings)
    paulis = [np.eye(2), np.array([[0, 1], [1, 0]]), np.diag([1, -1]), np.array([[0, -1j], [1j, 0]])]
    z_op = np.diag([1.0, -1.0])
    for k in range(len(settings)):
        u = dense_unitary(ens, settings, k)
        for z in range(2**n):
            zz = np.ones((1, 1))
            for q in range(n):
                zz = np.kron(zz, z_op if (z >> (n - 1 - q)) & 1 else np.eye(2))
            op = u.conj().T @ zz @ u
            mask = 0
            for codes in itertools.product(range(4), repeat=n):
                p = paulis[codes[0]]
                for c in codes[1:]:
                    p = np.kron(p, paulis[c])
                if abs(np.trace(p @ op)) > 1e-9:
                    mask = sum(1 << (n - 1 - q) for q in range(n) if codes[q])
            assert supports[k, z] == mask


def test_rotated_probabilities_match_the_sampler_rotation():
    # Our einsum rotation against the sampler's (manybody.simulation.sampling.rotate_dense), on a chain
    # and on a non-chain coupling graph (gates between distant qubits).
    n = 6
    psi = random_state(n, 21)
    for coupling in (chain(n), [(0, 3), (1, 4), (2, 5), (0, 1), (3, 4), (1, 2)]):
        ens = ShallowEnsemble(n, 3, coupling)
        settings = ens.draw(20, np.random.default_rng(22))
        assert np.allclose(fid.rotated_probabilities(psi, ens, settings),
                           born_probabilities(psi, ens, settings), atol=1e-13)


# ------------------------------------------------------- statistical checks
@pytest.mark.parametrize("kind,depth", [("local", 0), ("shallow", 2), ("global", 0)])
def test_product_state_fidelity_with_itself_and_with_an_orthogonal_one(kind, depth):
    # <psi|psi><psi|psi> = 1 and |<psi|phi>|^2 = 0 for orthogonal product states (fact of the trade);
    # estimates within 4 standard errors (common practice, no source).
    n = 4
    ens = {"local": LocalEnsemble(n), "shallow": ShallowEnsemble(n, depth, chain(n)),
           "global": GlobalEnsemble(n)}[kind]
    psi = product("0+1-")
    shadow = make_shadow(psi, ens, 1000 if kind == "global" else 3000, seed=7)
    pos, bits = shadow.snapshots()
    for target, exact in ((psi, 1.0), (product("0+0-"), 0.0)):
        est, err = mean_and_error(fid.fidelity_snapshots(target, ens, shadow.settings, pos, bits))
        assert abs(est - exact) <= 4 * err, (kind, exact, est, err)


@pytest.mark.parametrize("depth", [0, 1, 2, 3])
@pytest.mark.parametrize("state", ["ghz", "random"])
def test_depolarized_state_fidelity(depth, state):
    # rho = (1-p)|psi><psi| + p I/2^n has <psi|rho|psi> = (1-p) + p/2^n (fact of the trade).
    # Sampled as a mixture: each snapshot comes from psi with probability 1-p, otherwise from a
    # uniformly random basis state; U (I/2^n) U^dag = I/2^n, so those outcomes are uniform bits.
    n, p = 6, 0.3
    psi = ghz(n) if state == "ghz" else random_state(n, 8)
    ens = ShallowEnsemble(n, depth, chain(n))
    shadow = make_shadow(psi, ens, 4000, seed=10 + depth)
    pos, bits = shadow.snapshots()
    rng = np.random.default_rng(20 + depth)
    noisy = rng.random(len(bits)) < p
    bits = bits.copy()
    bits[noisy] = rng.integers(0, 2, size=(int(noisy.sum()), n), dtype=np.uint8)
    est, err = mean_and_error(fid.fidelity_snapshots(psi, ens, shadow.settings, pos, bits))
    exact = (1 - p) + p / 2**n
    assert abs(est - exact) <= 4 * err, (est, err, exact)


def test_readout_noise_is_undone_by_the_calibrated_local_eigenvalue():
    # Independent bit flips with probability e turn lambda = 1/3 into (1 - 2e)/3 for every one-qubit
    # Pauli (Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021)); with that lambda the fidelity of
    # GHZ with itself is 1 again, while the uncorrected estimate is biased low (prod of (1-2e) factors
    # over the weight of each Pauli). Both within 4 standard errors.
    n, e = 4, 0.05
    psi = ghz(n)
    ens = LocalEnsemble(n)
    shadow = make_shadow(psi, ens, 20000, seed=23)
    pos, bits = shadow.snapshots()
    rng = np.random.default_rng(24)
    bits = bits ^ (rng.random(bits.shape) < e).astype(np.uint8)
    basis = shadow.settings.basis[pos]
    est, err = mean_and_error(fid.local_fidelity_dense(psi, basis, bits, inv_lambda=3 / (1 - 2 * e)))
    assert abs(est - 1) <= 4 * err, (est, err)
    mps = qtn.MatrixProductState.from_dense(psi, [2] * n)
    per_qubit = np.full(n, 3 / (1 - 2 * e))
    assert np.allclose(fid.local_fidelity_mps(mps, basis[:50], bits[:50], inv_lambda=per_qubit),
                       fid.local_fidelity_dense(psi, basis[:50], bits[:50], inv_lambda=per_qubit), atol=1e-10)
    # uncorrected: <psi|N(psi)|psi> for GHZ with bit flips; GHZ = 2^-n sum_P <P> P, and
    # <P> -> (1-2e)^|P| <P> under the flips, so F = 2^-n sum_P (1-2e)^|P| <P>^2 (exact, enumerated)
    biased = fid.local_fidelity_dense(psi, basis, bits)
    exact = _noisy_ghz_fidelity(n, e)
    b_est, b_err = mean_and_error(biased)
    assert abs(b_est - exact) <= 4 * b_err and exact < 0.9, (b_est, b_err, exact)


def _noisy_ghz_fidelity(n, e):
    """2^-n sum_P (1 - 2e)^|P| <GHZ|P|GHZ>^2 by enumerating all 4^n Paulis (dense)."""
    psi = ghz(n)
    paulis = [np.eye(2), np.array([[0, 1], [1, 0]]), np.array([[0, -1j], [1j, 0]]), np.diag([1, -1])]
    total = 0.0
    for codes in itertools.product(range(4), repeat=n):
        p = paulis[codes[0]]
        for c in codes[1:]:
            p = np.kron(p, paulis[c])
        total += (1 - 2 * e) ** np.count_nonzero(codes) * np.vdot(psi, p @ psi).real ** 2
    return total / 2**n


def test_local_variance_of_product_state_fidelity():
    # For psi = |0...0> and the local inverse 3|v><v| - I, <0|O|0> is 2 (Z basis, outcome 0) or
    # 1/2 (X or Y basis), so E f^2 = ((4 + 2 * 1/4) / 3)^n = (3/2)^n and Var f = (3/2)^n - 1
    # (derived here from the Huang-Kueng-Preskill local inverse). Sample variance within 4 of its
    # standard errors (from the sample fourth moment, common practice, no source).
    n = 6
    psi = product("0" * n)
    ens = LocalEnsemble(n)
    shadow = make_shadow(psi, ens, 20000, seed=12)
    pos, bits = shadow.snapshots()
    f = fid.fidelity_snapshots(psi, ens, shadow.settings, pos, bits)
    var = f.var(ddof=1)
    var_err = np.sqrt((np.mean((f - f.mean()) ** 4) - var**2) / len(f))
    assert abs(var - (1.5**n - 1)) <= 4 * var_err, (var, var_err, 1.5**n - 1)


def _error_bar_ratio(n, depth, n_snapshots, seed):
    """Ratio of the depth-0 to the depth-d sample spread of f for GHZ, and its delta-method error."""
    spreads = []
    for d in (0, depth):
        ens = ShallowEnsemble(n, d, chain(n))
        shadow = make_shadow(ghz(n), ens, n_snapshots, seed=seed)
        pos, bits = shadow.snapshots()
        f = fid.fidelity_snapshots(ghz(n), ens, shadow.settings, pos, bits)
        s2 = f.var(ddof=1)
        s2_err = np.sqrt((np.mean((f - f.mean()) ** 4) - s2**2) / len(f))
        spreads.append((np.sqrt(s2), s2_err / (2 * np.sqrt(s2))))
    (s0, e0), (s1, e1) = spreads
    ratio = s0 / s1
    return ratio, ratio * np.hypot(e0 / s0, e1 / s1)


@pytest.mark.slow
def test_depth_log_n_shrinks_the_error_bar_n10():
    # Depth ~ log2(n) brickwork circuits lower the variance of high-weight observables such as the
    # GHZ fidelity (Bertoni et al., PRL 133, 020602 (2024); Akhtar, Hu, You, Quantum 7, 1026 (2023)).
    # Same number of snapshots at depths 0 and 3, n = 10: the depth-3 error bar is smaller by a
    # significant factor (ratio more than 4 of its own standard errors above 1), and the data do not
    # reject a factor of 3 (ratio + 4 sigma >= 3).
    ratio, err = _error_bar_ratio(10, 3, 20000, seed=11)
    assert ratio - 4 * err > 1, (ratio, err)
    assert ratio + 4 * err >= 3, (ratio, err)


def test_depth_log_n_shrinks_the_error_bar_fast():
    # Fast sibling of the test above (same sources): n = 6, depth 3 > log2(6).
    ratio, err = _error_bar_ratio(6, 3, 6000, seed=13)
    assert ratio - 4 * err > 1, (ratio, err)


# ------------------------------------------------------- cross-checks between routes
def test_global_fidelity_per_snapshot_matches_stim_unitary():
    # f = (2^n + 1)|<b|U|psi>|^2 - 1 (Huang, Kueng, Preskill 2020) with U from stim's
    # Tableau.to_unitary_matrix (stim, Gidney, Quantum 5, 497 (2021)); stim returns complex64,
    # hence the 1e-5 tolerance.
    n = 4
    psi = random_state(n, 14)
    ens = GlobalEnsemble(n)
    shadow = make_shadow(psi, ens, 40, shots=3, seed=15)
    pos, bits = shadow.snapshots()
    f = fid.global_fidelity(psi, ens, shadow.settings, pos, bits)
    index = bits.astype(np.int64) @ (1 << np.arange(n - 1, -1, -1))
    ref = [(2**n + 1) * abs((dense_unitary(ens, shadow.settings, k) @ psi)[b]) ** 2 - 1
           for k, b in zip(pos, index)]
    assert np.allclose(f, ref, atol=1e-5)


def test_local_dense_and_mps_agree_on_the_same_snapshots():
    # Two contractions of the same operator, checked against each other; the MPS comes from quimb.
    n = 10
    mps = qtn.MPS_rand_state(n, 8, dtype=complex, seed=16)
    psi = mps.to_dense().ravel()
    ens = LocalEnsemble(n)
    shadow = make_shadow(psi / np.linalg.norm(psi), ens, 300, seed=17)
    pos, bits = shadow.snapshots()
    basis = shadow.settings.basis[pos]
    dense = fid.local_fidelity_dense(psi, basis, bits)
    assert np.allclose(fid.local_fidelity_mps(mps, basis, bits, chunk=64), dense, rtol=0, atol=1e-10)
    assert np.allclose(fid.fidelity_snapshots(mps, ens, shadow.settings, pos, bits), dense, atol=1e-10)


def test_shallow_route_with_an_mps_target_and_depth_zero():
    # Depth-0 shallow ensemble is the local one: the Walsh-Hadamard route and the product operator
    # agree (two derivations of the same inverse channel, Huang, Kueng, Preskill 2020).
    n = 5
    psi = random_state(n, 18)
    ens = ShallowEnsemble(n, 0, chain(n))
    shadow = make_shadow(psi, ens, 200, seed=19)
    pos, bits = shadow.snapshots()
    walsh = fid.shallow_fidelity(psi, ens, shadow.settings, pos, bits)
    assert np.allclose(walsh, fid.local_fidelity_dense(psi, shadow.settings.basis[pos], bits), atol=1e-10)
    deep = ShallowEnsemble(n, 2, chain(n))
    shadow = make_shadow(psi, deep, 50, seed=20)
    pos, bits = shadow.snapshots()
    mps = qtn.MatrixProductState.from_dense(psi, [2] * n)
    assert np.allclose(fid.fidelity_snapshots(mps, deep, shadow.settings, pos, bits),
                       fid.shallow_fidelity(psi, deep, shadow.settings, pos, bits), atol=1e-10)


def test_bad_target_is_refused_with_one_sentence():
    with pytest.raises(InputError, match="2\\^n amplitudes"):
        fid.dense_target(np.ones(6))
    with pytest.raises(InputError, match="zero or not finite"):
        fid.dense_target(np.zeros(4))


def test_large_dense_targets_take_the_transfer_matrices_with_the_same_values():
    # Above LOCAL_DENSE_QUBITS a dense target is split into an MPS (SVDs, quimb); the per-snapshot
    # values must equal the product-operator route on the same vector to rounding.
    from manybody.estimation.fidelity import LOCAL_DENSE_QUBITS, fidelity_snapshots, local_fidelity_dense

    n = LOCAL_DENSE_QUBITS + 1
    rng = np.random.default_rng(11)
    psi = rng.normal(size=2**n) + 1j * rng.normal(size=2**n)
    psi /= np.linalg.norm(psi)
    ens = LocalEnsemble(n)
    settings = ens.draw(40, rng)
    bits = rng.integers(0, 2, (40, n), dtype=np.uint8)
    routed = fidelity_snapshots(psi, ens, settings, np.arange(40), bits)
    assert np.allclose(routed, local_fidelity_dense(psi, settings.basis, bits), atol=1e-9)
