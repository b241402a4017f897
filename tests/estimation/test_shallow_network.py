"""Shallow-circuit fidelity to MPS targets through a fitted inverse channel (manybody.estimation.shallow_network)."""

import itertools

import numpy as np
import pytest
import quimb.tensor as qtn

from manybody.errors import InputError
from manybody.estimation import fidelity as fid
from manybody.estimation import shallow_network as sn
from manybody.estimation.stabilizer import walsh_hadamard
from manybody.measure.ensembles import ShallowEnsemble
from manybody.simulation.sampling import dense_to_tensors, sample_dense, sample_mps
from tests.helpers import chain, dense_unitary

PAULIS = [np.eye(2), np.array([[0, 1], [1, 0]]), np.diag([1.0, -1.0]), np.array([[0, -1j], [1j, 0]])]


def all_patterns(n):
    return np.array(list(itertools.product([0, 1], repeat=n)), dtype=bool)


def random_state(n, seed):
    rng = np.random.default_rng(seed)
    psi = rng.normal(size=2**n) + 1j * rng.normal(size=2**n)
    return psi / np.linalg.norm(psi)


# ------------------------------------------------------- (a) eigenvalues as an MPS
@pytest.mark.parametrize("n, depth", [(8, 1), (8, 3), (10, 2), (10, 4)])
def test_eigenvalue_mps_equals_the_support_chain_on_every_pattern(n, depth):
    # lambda(s) = sum_s' Prob(s' | s) 3^-|s'| contracted over the light cone (docs/design.md section 3.3)
    ens = ShallowEnsemble(n, depth, chain(n))
    patterns = all_patterns(n)
    exact = np.array([ens.eigenvalue(p) for p in patterns])
    np.testing.assert_allclose(sn.mps_values(sn.eigenvalue_mps(ens), patterns), exact, rtol=1e-12)


def test_eigenvalue_mps_published_values():
    # depth 0: 3^-|P| (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020)); one random two-qubit
    # Clifford on the support is the global ensemble of two qubits: 1/(2^2 + 1) (same source)
    lam = sn.eigenvalue_mps(ShallowEnsemble(6, 0, chain(6)))
    patterns = all_patterns(6)
    np.testing.assert_allclose(sn.mps_values(lam, patterns), 3.0 ** -patterns.sum(axis=1), rtol=1e-12)
    lam = sn.eigenvalue_mps(ShallowEnsemble(6, 1, chain(6)))
    pair = np.zeros((1, 6), dtype=bool)
    pair[0, 2:4] = True
    assert sn.mps_values(lam, pair)[0] == pytest.approx(1 / 5, rel=1e-12)


# ------------------------------------------------------- the fitted inverse and its residual
def test_fit_residual_reported_exactly_and_shrinks_with_bond():
    n = 12
    ens = ShallowEnsemble(n, 3, chain(n))
    patterns = all_patterns(n)
    lam = np.array([ens.eigenvalue(p) for p in patterns])  # the chain itself, not the MPS
    rms = []
    for bond in (2, 4):
        inv = sn.shallow_inverse(ens, bond=bond, weight=0.5)
        r = lam * sn.mps_values(inv.inverse, patterns) - 1.0
        assert inv.exhaustive and inv.checked_patterns == 2**n
        assert inv.max_residual == pytest.approx(np.abs(r).max(), rel=1e-8)
        # weight 1/2 per bit: the plain mean over all 2^n patterns
        assert inv.rms_residual == pytest.approx(np.sqrt(np.mean(r**2)), rel=1e-6)
        rms.append(inv.rms_residual)
    assert rms[1] < 0.1 * rms[0]
    # the default weight 0.3 per bit: against the definition, the mean with weights 0.7^(n - |s|) 0.3^|s|
    inv = sn.shallow_inverse(ens, bond=4)
    r = lam * sn.mps_values(inv.inverse, patterns) - 1.0
    w = 0.3 ** patterns.sum(axis=1) * 0.7 ** (n - patterns.sum(axis=1))
    assert inv.rms_residual == pytest.approx(np.sqrt(np.sum(w * r**2)), rel=1e-6)
    by_weight = [np.abs(r[patterns.sum(axis=1) == k]).max() for k in range(n + 1)]
    np.testing.assert_allclose(inv.max_residual_by_weight, by_weight, rtol=1e-8)


def test_tiny_fit_residual_is_reported_not_rounded_to_zero():
    # our own behaviour against its definition (no outside source): depth 2 at bond 8 fits 1/lambda to
    # ~1e-11, and the weighted RMS must match the direct mean over all 2^n patterns (lambda from the support
    # chain itself), far below the 1e-7 that <lambda g, lambda g> - 2 <lambda g, 1> + 1 could resolve
    n = 10
    ens = ShallowEnsemble(n, 2, chain(n))
    patterns = all_patterns(n)
    lam = np.array([ens.eigenvalue(p) for p in patterns])
    inv = sn.shallow_inverse(ens, bond=8, weight=0.5)
    r = lam * sn.mps_values(inv.inverse, patterns) - 1.0
    direct = np.sqrt(np.mean(r**2))
    assert 0 < direct < 1e-8
    assert inv.rms_residual == pytest.approx(direct, rel=1e-3)


# ------------------------------------------------------- (b) per-snapshot values against dense routes
def shallow_setup(n, depth, shots, n_settings, seed, psi):
    rng = np.random.default_rng(seed)
    ens = ShallowEnsemble(n, depth, chain(n))
    settings = ens.draw(n_settings, rng)
    bits = sample_dense(psi, ens, settings, shots, rng)
    return ens, settings, np.repeat(np.arange(n_settings), shots), bits


@pytest.mark.parametrize("n, bond", [(8, 2), (10, 4), (10, 16)])
def test_mps_route_within_the_residual_bound_of_the_exact_dense_values(n, bond):
    # exact f_i from the dense Walsh-Hadamard route (docs/design.md section 4.5); the fitted g
    # changes f_i by 2^-n sum_z (-1)^(z.b) <psi|Q_z|psi> r(Q_z) / lambda(Q_z), Q_z = U^dag Z^z U,
    # so |f_mps - f_exact| <= max|r| 2^-n sum_z |<psi|Q_z|psi>| / lambda(Q_z)
    psi = random_state(n, 3)
    ens, settings, idx, bits = shallow_setup(n, 3, 2, 12, 4, psi)
    inv = sn.shallow_inverse(ens, bond=bond)
    exact = fid.shallow_fidelity(psi, ens, settings, idx, bits)
    got = sn.shallow_fidelity_mps(inv, dense_to_tensors(psi), ens, settings, idx, bits)
    probs = fid.rotated_probabilities(psi, ens, settings)
    inv_lam = fid.inverse_eigenvalue_table(ens, fid.stabilizer_supports(ens, settings))
    bound = inv.max_residual * (np.abs(walsh_hadamard(probs)) * inv_lam).sum(axis=1) / 2**n
    assert np.all(np.abs(got - exact) <= bound[idx] * (1 + 1e-9) + 1e-9)
    if bond < 16:  # the check has teeth: a coarse fit does move the values
        assert inv.max_residual > 1e-4 and np.max(np.abs(got - exact)) > 1e-6
    else:
        np.testing.assert_allclose(got, exact, atol=1e-8)


def dense_inverse_channel(n, weights_of_support, sigma):
    """2^-n sum_P w(supp P) tr(P sigma) P with every Pauli string built as a Kronecker product."""
    out = np.zeros_like(sigma)
    for codes in itertools.product(range(4), repeat=n):
        p = np.array([[1.0]])
        for c in codes:
            p = np.kron(p, PAULIS[c])
        support = np.array(codes) > 0
        out += weights_of_support(support) * np.trace(p @ sigma) * p
    return out / 2**n


def test_brute_force_dense_construction_from_the_definition():
    # M^-1(X) = 2^-n sum_P tr(P X) P / lambda_P (a Pauli-diagonal channel; Huang, Kueng, Preskill 2020),
    # the approximate G the same with g(supp P); sigma = U^dag|b><b|U from the setting's gate unitaries
    n = 5
    psi = random_state(n, 7)
    ens, settings, idx, bits = shallow_setup(n, 2, 2, 3, 8, psi)
    inv = sn.shallow_inverse(ens, bond=2)
    got = sn.shallow_fidelity_mps(inv, dense_to_tensors(psi), ens, settings, idx, bits)
    exact = fid.shallow_fidelity(psi, ens, settings, idx, bits)
    index = bits.astype(np.int64) @ (1 << np.arange(n - 1, -1, -1))
    for i, (k, b) in enumerate(zip(idx, index)):
        phi = dense_unitary(ens, settings, k).conj().T[:, b]
        sigma = np.outer(phi, phi.conj())
        approx = dense_inverse_channel(n, lambda s: sn.mps_values(inv.inverse, s[None])[0], sigma)
        inverse = dense_inverse_channel(n, lambda s: 1.0 / ens.eigenvalue(s), sigma)
        assert np.vdot(psi, approx @ psi).real == pytest.approx(got[i], abs=1e-9)
        assert np.vdot(psi, inverse @ psi).real == pytest.approx(exact[i], abs=1e-9)
    assert np.max(np.abs(got - exact)) > 1e-6  # bond 2 is a coarse fit: the two constructions differ


def test_inputs_are_checked():
    ens = ShallowEnsemble(4, 1, np.array([(0, 2), (1, 3)]))
    with pytest.raises(InputError, match="neighbouring qubits"):
        sn.eigenvalue_mps(ens)
    ens = ShallowEnsemble(4, 1, chain(4))
    settings = ens.draw(1, 0)
    with pytest.raises(InputError, match="5 sites but the snapshots have 4 qubits"):
        sn.shallow_fidelity_mps(sn.shallow_inverse(ens, bond=2), qtn.MPS_computational_state("00000"), ens,
                                settings, np.zeros(1, dtype=int), np.zeros((1, 4), dtype=np.uint8))


# ------------------------------------------------------- (c) beyond dense sizes
def mps_snapshots(state, n, depth, n_settings, shots, seed):
    """A depth-``depth`` chain ensemble, its settings and shots of an MPS ``state``: (ens, settings, idx, bits)."""
    rng = np.random.default_rng(seed)
    ens = ShallowEnsemble(n, depth, chain(n))
    settings = ens.draw(n_settings, rng)
    bits, _ = sample_mps(state, ens, settings, shots, rng)
    return ens, settings, np.repeat(np.arange(n_settings), shots), bits


def mps_fidelity_estimate(state, target, n, depth, n_settings, seed, bond=8):
    ens, settings, idx, bits = mps_snapshots(state, n, depth, n_settings, 1, seed)
    inv = sn.shallow_inverse(ens, bond=bond)
    f = sn.shallow_fidelity_mps(inv, target, ens, settings, idx, bits)
    return f.mean(), f.std(ddof=1) / np.sqrt(len(f)), inv


def assert_within(mean, error, exact, inv):
    # 4 standard errors (common practice, no source) plus the bias bound max|r| of the fit;
    # beyond 16 qubits max|r| is taken over a sample of patterns (see ShallowInverse)
    assert abs(mean - exact) <= 4 * error + inv.bias_bound, (mean, error, inv.bias_bound)


def test_product_state_fidelity_beyond_dense_sizes():
    # a state has fidelity 1 with itself; |0...0> and |1...1> are orthogonal: fidelity 0
    n = 24
    zeros = qtn.MPS_computational_state("0" * n)
    ones = qtn.MPS_computational_state("1" * n)
    mean, err, inv = mps_fidelity_estimate(zeros, zeros, n, 2, 150, 11)
    assert_within(mean, err, 1.0, inv)
    mean, err, inv = mps_fidelity_estimate(zeros, ones, n, 2, 150, 12)
    assert_within(mean, err, 0.0, inv)


def test_ghz_fidelity_beyond_dense_sizes():
    n = 24
    ghz = qtn.MPS_ghz_state(n)
    mean, err, inv = mps_fidelity_estimate(ghz, ghz, n, 3, 120, 13)
    assert_within(mean, err, 1.0, inv)
    mean, err, inv = mps_fidelity_estimate(qtn.MPS_computational_state("01" * (n // 2)), ghz, n, 3, 120, 14)
    assert_within(mean, err, 0.0, inv)  # <GHZ|0101...> = 0


@pytest.mark.slow
def test_self_fidelity_of_a_cluster_state_with_many_snapshots():
    # 1D cluster state (bond 2): CZ on every bond of |+...+> (Briegel, Raussendorf, PRL 86, 910 (2001));
    # a state has fidelity 1 with itself; 2000 snapshots at depth 3 for a smaller error bar
    n = 24
    cluster = qtn.MPS_computational_state("+" * n)
    cz = np.diag([1.0, 1.0, 1.0, -1.0])
    for q in range(n - 1):
        cluster.gate_(cz, (q, q + 1), contract="split")
    mean, err, inv = mps_fidelity_estimate(cluster, cluster, n, 3, 2000, 15)
    assert_within(mean, err, 1.0, inv)


def test_depth_zero_is_the_local_estimator():
    # depth 0: lambda = 3^-|s| is a product, the fit is exact at bond 1, and f_i is the local
    # estimator <psi| (x)_q (3|v_q><v_q| - I) |psi> (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020))
    n = 12
    target = qtn.MPS_rand_state(n, 4, dtype=complex, seed=5)
    ens, settings, idx, bits = mps_snapshots(target, n, 0, 40, 1, 6)
    inv = sn.shallow_inverse(ens, bond=1)
    assert inv.max_residual < 1e-10  # rounding only
    got = sn.shallow_fidelity_mps(inv, target, ens, settings, idx, bits)
    np.testing.assert_allclose(got, fid.local_fidelity_mps(target, settings.basis, bits), atol=1e-9)


def test_threads_share_the_chunks_without_changing_a_bit():
    # our own behaviour (no outside source): each chunk is computed alone, so one thread or two give
    # the same numbers; inside a pool's worker a kernel starts no threads of its own
    from manybody.threads import ordered_map, spare_workers

    n = 10
    target = qtn.MPS_rand_state(n, 4, dtype=complex, seed=8)
    ens, settings, idx, bits = mps_snapshots(target, n, 3, 12, 2, 9)
    inv = sn.shallow_inverse(ens, bond=4)
    one = sn.shallow_fidelity_mps(inv, target, ens, settings, idx, bits, chunk=3, workers=1)
    two = sn.shallow_fidelity_mps(inv, target, ens, settings, idx, bits, chunk=3, workers=2)
    np.testing.assert_array_equal(one, two)
    assert list(ordered_map(lambda _: spare_workers(), range(3), workers=2)) == [1, 1, 1]


def test_real_target_on_real_planes_equals_the_complex_route():
    # a global phase leaves <psi|rho|psi> unchanged (fact of quantum mechanics): a real target, and the
    # same target times exp(0.3i) (complex tensors, the complex route) give the same f_i; the real
    # target also agrees with the exact dense Walsh-Hadamard route (docs/design.md section 4.5)
    n = 10
    psi = np.random.default_rng(10).normal(size=2**n)
    psi /= np.linalg.norm(psi)
    ens, settings, idx, bits = shallow_setup(n, 3, 2, 10, 3, psi)
    inv = sn.shallow_inverse(ens, bond=16)
    real = sn.shallow_fidelity_mps(inv, dense_to_tensors(psi), ens, settings, idx, bits)
    phased = sn.shallow_fidelity_mps(inv, dense_to_tensors(np.exp(0.3j) * psi), ens, settings, idx, bits)
    np.testing.assert_allclose(real, phased, atol=1e-10)
    np.testing.assert_allclose(real, fid.shallow_fidelity(psi, ens, settings, idx, bits), atol=1e-8)


def test_single_precision_sweep_within_its_rounding_bound_of_the_exact_values():
    # the single-precision sweep against the exact dense Walsh-Hadamard route (docs/design.md section
    # 4.5; itself checked against the Pauli-diagonal inverse channel of Huang, Kueng, Preskill, Nat. Phys.
    # 16, 1050 (2020) in the brute-force test above) on snapshots other than those sweep_precision
    # compared: within the fit's bound plus the
    # rounding bound; a coarse fit (bond 4 at 12 qubits, depth 3) takes single precision
    n = 12
    psi = random_state(n, 11)
    ens, settings, idx, bits = shallow_setup(n, 3, 2, 12, 12, psi)
    inv = sn.shallow_inverse(ens, bond=4)
    chosen = sn.sweep_precision(inv, dense_to_tensors(psi), ens)
    assert chosen.precision == "single" and 0 < chosen.rounding_bound <= sn.ROUNDING_SHARE * inv.bias_bound
    single = sn.shallow_fidelity_mps(inv, dense_to_tensors(psi), ens, settings, idx, bits, precision="single")
    double = sn.shallow_fidelity_mps(inv, dense_to_tensors(psi), ens, settings, idx, bits)
    assert np.max(np.abs(single - double)) <= chosen.rounding_bound
    exact = fid.shallow_fidelity(psi, ens, settings, idx, bits)
    probs = fid.rotated_probabilities(psi, ens, settings)  # the per-snapshot bound of the test above
    inv_lam = fid.inverse_eigenvalue_table(ens, fid.stabilizer_supports(ens, settings))
    bound = inv.max_residual * (np.abs(walsh_hadamard(probs)) * inv_lam).sum(axis=1) / 2**n
    assert np.all(np.abs(single - exact) <= bound[idx] + chosen.rounding_bound)
    assert np.max(np.abs(single - double)) > 0  # the single sweep does round differently


def test_an_exact_fit_keeps_double_precision():
    # our own rule: single-precision rounding (~1e-6) is not negligible beside a fit exact to ~1e-11,
    # so the sweep stays in double precision and adds no rounding bound
    n = 10
    ens = ShallowEnsemble(n, 2, chain(n))
    inv = sn.shallow_inverse(ens, bond=16)
    chosen = sn.sweep_precision(inv, qtn.MPS_rand_state(n, 4, dtype=complex, seed=2), ens)
    assert inv.bias_bound < 1e-9 and chosen.precision == "double" and chosen.rounding_bound == 0.0
    with pytest.raises(InputError, match="precision 'half'"):
        sn.shallow_fidelity_mps(inv, qtn.MPS_rand_state(n, 4, seed=2), ens, ens.draw(1, 0), [0], np.zeros((1, n)),
                                precision="half")


# ------------------------------------------------------- the bias bound by support weight
def test_weight_bias_bound_is_the_linear_programme_maximum():
    # max sum_w m_w T_w subject to 0 <= T_w <= 2^-n C(n, w) 3^w and sum_w T_w <= 1, against scipy's
    # linear-programming solver (scipy.optimize.linprog, HiGHS)
    from scipy.optimize import linprog

    rng = np.random.default_rng(3)
    for n in (6, 12, 40):
        caps = sn.weight_caps(n)
        # 2^-n sum_w C(n, w) 3^w = 2^n (binomial theorem): the caps only bind for few-body weights
        assert caps[0] == pytest.approx(2.0**-n) and caps[n // 2] == 1.0
        for _ in range(5):
            m = rng.random(n + 1) * 10.0 ** rng.uniform(-4, 0, n + 1)
            lp = linprog(-m, A_ub=np.ones((1, n + 1)), b_ub=[1.0], bounds=list(zip(np.zeros(n + 1), caps)))
            assert sn.weight_bias_bound(m, n) == pytest.approx(-lp.fun, rel=1e-9, abs=1e-15)
            assert sn.weight_bias_bound(m, n) <= m.max()


def pauli_expectations(psi):
    """<psi|P|psi> (Hermitian P = i^|x&z| X^x Z^z) and the support x|z of every Pauli, both (2^n, 2^n) [x, z]."""
    from scipy.linalg import hadamard

    dim = len(psi)
    b = np.arange(dim)
    u = np.conj(psi[b[None, :] ^ b[:, None]]) * psi[None, :]  # u[x, b] = psi*(b ^ x) psi(b)
    xz = u @ hadamard(dim)  # <psi|X^x Z^z|psi> = sum_b (-1)^(z.b) u[x, b] (Sylvester ordering)
    overlap = np.vectorize(lambda k: bin(k).count("1"))(b[:, None] & b[None, :])
    return (1j) ** overlap * xz, b[:, None] | b[None, :]


def test_exact_bias_of_a_coarse_fit_within_the_weight_bound():
    # E[f] - F = 2^-n sum_P r(supp P) tr(P rho) tr(P psi) (the inverse channel is diagonal in the Pauli
    # basis, Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020); docs/design.md section 4.5), summed over
    # all 4^n Paulis (scipy's Hadamard matrix) for pure rho and psi: within the weight-aware
    # bound, which for this fit (worst residual on one-qubit supports) is below max|r|
    n = 10
    ens = ShallowEnsemble(n, 3, chain(n))
    inv = sn.shallow_inverse(ens, bond=4)
    assert inv.bias_bound < 0.7 * inv.max_residual
    patterns = all_patterns(n)
    r = sn.mps_values(inv.eigenvalues, patterns) * sn.mps_values(inv.inverse, patterns) - 1.0
    zero = np.zeros(2**n)
    zero[0] = 1.0
    ghz = np.zeros(2**n)
    ghz[[0, -1]] = 1 / np.sqrt(2)
    states = [zero, ghz, np.full(2**n, 2 ** (-n / 2)), random_state(n, 1), random_state(n, 2)]
    for rho, psi in [(zero, zero), (ghz, ghz), (states[2], states[2]), (states[3], states[3]),
                     (states[3], states[4]), (ghz, states[2])]:
        e_rho, support = pauli_expectations(rho)
        e_psi, _ = pauli_expectations(psi)
        bias = np.sum(r[support] * e_rho * e_psi).real / 2**n
        assert abs(bias) <= inv.bias_bound * (1 + 1e-9)
    # the same definition reproduces tr(rho psi) with r -> 1 (g = 1/lambda would give f's mean = F)
    e_psi, _ = pauli_expectations(states[3])
    assert np.sum(e_psi * e_psi).real / 2**n == pytest.approx(1.0, rel=1e-10)


def test_residual_patterns_visit_every_weight_beyond_the_exhaustive_size():
    # our own sampling rule: every weight 0..n is checked, few-body and nearly full supports all of them
    n = 40
    patterns, exhaustive = sn.residual_patterns(n, np.random.default_rng(0))
    weights = np.bincount(patterns.sum(axis=1), minlength=n + 1)
    assert not exhaustive and np.all(weights > 0)
    assert weights[1] == n and weights[2] == n * (n - 1) // 2 and weights[n - 1] == n
    assert weights[3] == weights[n // 2] == sn.SAMPLED_PATTERNS // (n - 5)


def test_fitted_route_takes_the_cheapest_bond_whose_bias_is_negligible():
    # our own rule (docs/design.md section 4.5, no outside source): the pilot's spread over sqrt(N) is the
    # expected error; the bond is the first of BONDS whose bias bound is at most BIAS_SHARE of it
    n = 20
    state = qtn.MPS_rand_state(n, 4, seed=4)
    ens, settings, idx, bits = mps_snapshots(state, n, 3, 48, 1, 6)
    pilot = sn.shallow_fidelity_mps(sn.shallow_inverse(ens, bond=sn.PILOT_BOND), state, ens, settings, idx, bits,
                                    precision="single")
    chosen = []
    for n_snapshots in (10, 10**4, 10**8):
        route = sn.fitted_route(ens, state, settings, idx, bits, n_snapshots)
        expected = np.std(pilot, ddof=1) / np.sqrt(n_snapshots)
        assert route.expected_error == pytest.approx(expected, rel=1e-9) and route.pilot_snapshots == 48
        bonds = list(sn.BONDS)
        k = bonds.index(route.inverse.bond)
        fits = route.inverse.bias_bound <= sn.BIAS_SHARE * expected
        assert fits or k == len(bonds) - 1
        assert all(sn.shallow_inverse(ens, bond=b).bias_bound > sn.BIAS_SHARE * expected for b in bonds[:k])
        chosen.append(route.inverse.bond)
    assert chosen[0] < chosen[-1]  # more snapshots, a finer fit
    assert sn.fitted_route(ens, state, settings, idx, bits, 10**4) is sn.fitted_route(ens, state, settings, idx,
                                                                                      bits, 10**4)  # cached
