"""Moments of the partial transpose (p2, p3) and the p3-PPT test, against dense numpy partial transposes."""

import numpy as np
import pytest

from manybody.errors import InputError
from manybody.estimation.accumulators.pt_moments import (
    bipartitions_of,
    histogram_operator,
    parse_bipartitions,
    site_projectors,
    site_snapshot_operators,
)
from manybody.estimation.calibration import Calibration
from manybody.estimation.driver import estimate
from manybody.estimation.setup import parse_subsystems
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.references import exact
from manybody.simulation.noise import Noise
from manybody.simulation.statevector import BASIS_ROTATIONS
from tests.helpers import chain, make_shadow, tfim_model, within

SINGLET = np.array([0, 1, -1, 0]) / np.sqrt(2)
BELL = np.array([1, 0, 0, 1]) / np.sqrt(2)


# ----------------------------------------------------------------- dense references (numpy)
def partial_transpose(rho, on_a):
    """rho^{T_A} by swapping the row and column index of every qubit of A (numpy reshape/transpose)."""
    k = len(on_a)
    perm = list(range(2 * k))
    for q, a in enumerate(on_a):
        if a:
            perm[q], perm[k + q] = k + q, q
    return rho.reshape((2,) * (2 * k)).transpose(perm).reshape(2**k, 2**k)


def dense_moments(rho, on_a):
    """p2 = tr (rho^{T_A})^2 and p3 = tr (rho^{T_A})^3 with numpy."""
    r = partial_transpose(rho, on_a)
    return float(np.trace(r @ r).real), float(np.trace(r @ r @ r).real)


def purification(rho):
    """|psi> = sum_k sqrt(w_k) |e_k>|k>: system qubits first, as many ancillas after them."""
    w, v = np.linalg.eigh(rho)
    return (v * np.sqrt(np.clip(w, 0, None))).reshape(-1).astype(complex)


def werner(p):
    return p * np.outer(SINGLET, SINGLET) + (1 - p) * np.eye(4) / 4


def pt_estimate(shadow, text, **kw):
    return estimate(shadow, None, quantities=("pt_moments",), options={"bipartitions": text}, **kw)


# ----------------------------------------------------------------- parsing and refusals
def test_parse_bipartitions_labels_and_mistakes():
    parts = parse_bipartitions("0-1|2-3; 0,2|1", 6)
    assert parts == [("0-1|2-3", (0, 1), (2, 3)), ("0,2|1", (0, 2), (1,))]
    for bad, words in (("0-1", "two subsystems"), ("0|", "two subsystems"), ("0-1|1-2", "both A and B"),
                       ("0|9", "outside the lattice"), ("0|x", "range a-b"), ("0|1|2", "two subsystems")):
        with pytest.raises(InputError, match=words) as info:
            parse_bipartitions(bad, 6)
        assert info.value.argument == "bipartitions"


def test_bipartitions_as_sequences():
    parts = bipartitions_of(["0|1", ("pair", [2, 3], [4]), ((0,), (5,))], 6)
    assert parts == [("0|1", (0,), (1,)), ("pair", (2, 3), (4,)), ("0|5", (0,), (5,))]
    with pytest.raises(InputError, match="both A and B"):
        bipartitions_of([("x", [1], [1])], 6)


def test_refuses_circuit_ensembles_and_large_subsystems():
    n = 8
    shallow = make_shadow(exact.product_state("0" * n), ShallowEnsemble(n, 1, chain(n)), 50, seed=1)
    with pytest.raises(InputError, match="local ensemble"):
        pt_estimate(shallow, "0|1")
    local = make_shadow(exact.product_state("0" * n), LocalEnsemble(n), 50, seed=1)
    with pytest.raises(InputError, match="at most 6"):
        pt_estimate(local, "0-3|4-6")
    assert "pt_moment2" not in estimate(local, None, quantities=("pt_moments",))  # nothing asked: nothing done


# ----------------------------------------------------------------- kernels
def test_snapshot_operators_invert_the_local_channel():
    # E_U,b[3 U^dag|b><b|U - I] = rho for one qubit measured in a uniformly random X/Y/Z basis
    # (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020)); probabilities from the sampler's rotations.
    rng = np.random.default_rng(0)
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    rho = m @ m.conj().T
    rho /= np.trace(rho)
    sigma = site_snapshot_operators(3.0, False)
    prob = [np.real(np.diag(BASIS_ROTATIONS[b] @ rho @ BASIS_ROTATIONS[b].conj().T)) for b in range(3)]
    mean = sum(prob[w // 2][w % 2] * sigma[w] for w in range(6)) / 3
    assert np.allclose(mean, rho)
    # the +1 eigenstate of Y is (|0> + i|1>)/sqrt 2 (textbook); transposition maps it to the -1 eigenstate
    plus_i = np.array([1, 1j]) / np.sqrt(2)
    assert np.allclose(site_projectors()[2], np.outer(plus_i, plus_i.conj()))
    assert np.allclose(site_snapshot_operators(3.0, True)[2], 3 * np.outer(plus_i.conj(), plus_i) - np.eye(2))


def test_triple_tables_contract_to_the_trace_of_the_cube():
    # sum_{abc} h_a h_b h_c prod_q T_q(a_q, b_q, c_q), T_q = tr(sigma_a sigma_b sigma_c) (transposed on A),
    # by explicit numpy einsum over the 6 x 6 x 6 tables, equals tr S^3 from the histogram operator.
    rng = np.random.default_rng(1)
    h = rng.integers(0, 4, size=6**3).astype(float)
    tables = [site_snapshot_operators(3.0, t) for t in (True, False, True)]
    triple = [np.einsum("aij,bjk,cki->abc", s, s, s) for s in tables]
    t = h.reshape(6, 6, 6)  # snapshot words (site 0, site 1, site 2)
    brute = np.einsum("ABC,DEF,GHI,ADG,BEH,CFI->", t, t, t, *triple, optimize=True)
    op = histogram_operator(h, tables)
    assert np.isclose(np.trace(op @ op @ op).real, brute.real, rtol=1e-12)
    assert abs(brute.imag) < 1e-9 * abs(brute.real)


# ----------------------------------------------------------------- the U-statistics, exactly
def brute_force_moments(shadow, qubits, on_a, inv):
    """p2, p3 by explicit sums over pairs and triples of snapshots from distinct settings, dense kron products."""
    basis = shadow.settings.basis[np.searchsorted(shadow.settings.ids, shadow.record_setting)]
    w = 2 * basis[:, qubits].astype(int) + shadow.outcomes[:, qubits]
    rho = []
    for row in w:  # dense single-snapshot estimate, then numpy's partial transpose of the whole matrix
        op = np.ones((1, 1))
        for q, word in enumerate(row):
            op = np.kron(op, site_snapshot_operators(inv[q], False)[word])
        rho.append(partial_transpose(op, on_a))
    rho = np.array(rho)
    s = shadow.record_setting
    distinct2 = s[:, None] != s[None, :]
    distinct3 = distinct2[:, :, None] & distinct2[:, None, :] & distinct2[None, :, :]
    pairs = np.einsum("iab,jba->ij", rho, rho).real
    triples = np.einsum("iab,jbc,kca->ijk", rho, rho, rho).real
    return pairs[distinct2].mean(), triples[distinct3].mean()


@pytest.mark.parametrize("shots", [1, 3])
def test_estimates_equal_the_brute_force_u_statistics(shots):
    n = 5
    rng = np.random.default_rng(7)
    psi = rng.normal(size=2**n) + 1j * rng.normal(size=2**n)
    shadow = make_shadow(psi / np.linalg.norm(psi), LocalEnsemble(n), 48 // shots, shots=shots, seed=2)
    result = pt_estimate(shadow, "0,3|1")  # qubits in the order A then B: 0, 3, 1
    p2, p3 = brute_force_moments(shadow, [0, 3, 1], [True, True, False], np.full(3, 3.0))
    assert np.isclose(float(result.pt_moment2[0]), p2, rtol=1e-10)
    assert np.isclose(float(result.pt_moment3[0]), p3, rtol=1e-10)


def test_calibrated_estimates_equal_the_brute_force_u_statistics():
    # Robust shadows: one calibrated 1/lambda per qubit in every snapshot factor
    # (Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021)).
    n = 4
    noise = Noise(p01=0.05, p10=0.05)
    cal = Calibration(make_shadow(exact.product_state("0" * n), LocalEnsemble(n), 4000, seed=3, noise=noise))
    shadow = make_shadow(purification(werner(0.7)), LocalEnsemble(n), 40, shots=2, seed=4, noise=noise)
    result = pt_estimate(shadow, "1|0", calibration=cal)
    p2, p3 = brute_force_moments(shadow, [1, 0], [True, False], cal.inv_local[[1, 0]])
    assert np.isclose(float(result.pt_moment2[0]), p2, rtol=1e-10)
    assert np.isclose(float(result.pt_moment3[0]), p3, rtol=1e-10)


def test_settings_split_across_chunks_give_the_same_estimates():
    # Per-setting outcome histograms collect the shots of a setting whatever the chunk boundaries.
    n = 4
    shadow = make_shadow(purification(werner(0.6)), LocalEnsemble(n), 300, shots=7, seed=6)
    whole = pt_estimate(shadow, "0|1;1|0", chunk=1 << 14)
    pieces = pt_estimate(shadow, "0|1;1|0", chunk=5)
    for name in ("pt_moment2", "pt_moment3", "ppt_violation", "ppt_violation_err"):
        assert np.allclose(whole[name].values, pieces[name].values, rtol=1e-10)
    # transposing B instead of A gives the same spectrum (rho^{T_B} = (rho^{T_A})^T)
    assert np.allclose(whole.pt_moment3.values[0], whole.pt_moment3.values[1], rtol=1e-10)


@pytest.mark.parametrize("shots", [1, 4])
def test_p2_is_the_purity_of_a_and_b_together(shots):
    # The partial transpose preserves tr rho^2 (a fact of the trade): p2 equals the purity estimate of
    # A u B from the same snapshots, values and jackknife errors, to rounding.
    n = 5
    _, psi = exact.ground_state(tfim_model(n).hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(n), 3000 // shots, shots=shots, seed=5)
    result = estimate(shadow, None, parse_subsystems("0,1,3", n),
                      quantities=("purity", "pt_moments"), options={"bipartitions": "0,3|1"})
    assert np.isclose(float(result.pt_moment2[0]), float(result.purity[0]), rtol=1e-10)
    assert np.isclose(float(result.pt_moment2_err[0]), float(result.purity_err[0]), rtol=1e-8)


# ----------------------------------------------------------------- published facts, statistically
def test_werner_threshold_of_the_dense_moments():
    # Werner states p|psi-><psi-| + (1-p) I/4 are entangled iff p > 1/3 (Werner, PRA 40, 4277 (1989);
    # Peres, PRL 77, 1413 (1996)); the dense moments (numpy) show p3 < p2^2 exactly there, i.e. the p3-PPT
    # condition of Elben et al., PRL 125, 200501 (2020) detects every entangled Werner state.
    grid = np.linspace(0, 1, 301)
    violation = np.array([np.subtract(*np.array(dense_moments(werner(p), [True, False])) ** [2, 1]) for p in grid])
    assert np.all(violation[grid > 1 / 3 + 1e-9] > 0)
    assert np.all(violation[(grid > 0) & (grid < 1 / 3 - 1e-9)] < 0)
    assert abs(violation[0]) < 1e-15  # I/4: all eigenvalues equal, p2^2 = p3


@pytest.mark.parametrize("p, shots", [(0.8, 1), (0.2, 1), (0.8, 5)])
def test_werner_states(p, shots):
    # Two system qubits (0, 1) purified by two ancillas (2, 3); A = 0, B = 1. Dense values from numpy.
    rho = werner(p)
    p2, p3 = dense_moments(rho, [True, False])
    shadow = make_shadow(purification(rho), LocalEnsemble(4), 20000 // shots, shots=shots, seed=int(10 * p) + shots)
    r = pt_estimate(shadow, "0|1")
    for name, value in (("pt_moment2", p2), ("pt_moment3", p3), ("ppt_violation", p2**2 - p3)):
        ok, worst = within(r[name].values, r[name + "_err"].values, value)
        assert ok, (name, worst)
    if p > 1 / 3:  # entangled: expected significance ~14 (one shot) or ~8 (five shots) at these sizes
        assert float(r.ppt_significance[0]) > 4
    else:
        assert float(r.ppt_significance[0]) < 4


@pytest.mark.parametrize("pairs", [2, 3])
def test_bell_pairs_split_across_the_cut(pairs):
    # Bell pairs on (0, 1), (2, 3), ...; A = the even qubits, B = the odd ones: rho_AB is maximally entangled
    # of dimension d = 2^pairs, whose partial transpose has eigenvalues +1/d (d(d+1)/2 times) and -1/d
    # (d(d-1)/2 times) (textbook), so p2 = 1, p3 = 1/d^2; checked against numpy too. pairs = 3 is the
    # largest size accepted (6 qubits).
    psi = BELL
    for _ in range(pairs - 1):
        psi = np.kron(psi, BELL)
    k, d = 2 * pairs, 2**pairs
    rho = np.outer(psi, psi.conj())
    p2, p3 = dense_moments(rho, [q % 2 == 0 for q in range(k)])
    assert np.isclose(p2, 1) and np.isclose(p3, 1 / d**2)
    shadow = make_shadow(psi, LocalEnsemble(k), 20000, seed=11)
    even, odd = ",".join(map(str, range(0, k, 2))), ",".join(map(str, range(1, k, 2)))
    r = pt_estimate(shadow, f"{even}|{odd}")
    for name, value in (("pt_moment2", p2), ("pt_moment3", p3), ("ppt_violation", p2**2 - p3)):
        ok, worst = within(r[name].values, r[name + "_err"].values, value)
        assert ok, (name, worst)
    assert float(r.ppt_significance[0]) > 4


def test_separable_states_show_no_violation():
    # Separable states are PPT, so p3 >= p2^2 (Peres 1996; Cauchy-Schwarz on the PT eigenvalues):
    # a mixed product state rho_0 (x) rho_1 (each qubit entangled with its own ancilla) and the two-qubit
    # reduction of a 4-qubit GHZ state, (|00><00| + |11><11|)/2, for which p2^2 = p3 = 1/4 exactly.
    rng = np.random.default_rng(12)
    pair = [rng.normal(size=4) + 1j * rng.normal(size=4) for _ in range(2)]
    pair = [v / np.linalg.norm(v) for v in pair]
    product = np.kron(pair[0], pair[1]).reshape(2, 2, 2, 2).transpose(0, 2, 1, 3).reshape(-1)  # qubits 0,1 | 2,3
    ghz = np.zeros(16)
    ghz[0] = ghz[-1] = 2**-0.5
    for psi, seed in ((product, 13), (ghz, 14)):
        rho = exact.reduced_density_matrix(psi, [0, 1])
        p2, p3 = dense_moments(rho, [True, False])
        assert p2**2 <= p3 + 1e-12
        r = pt_estimate(make_shadow(psi, LocalEnsemble(4), 20000, seed=seed), "0|1")
        for name, value in (("pt_moment2", p2), ("pt_moment3", p3), ("ppt_violation", p2**2 - p3)):
            ok, worst = within(r[name].values, r[name + "_err"].values, value)
            assert ok, (name, worst)
        assert float(r.ppt_significance[0]) < 4
