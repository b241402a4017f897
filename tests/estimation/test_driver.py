"""Estimates against exact values, error-bar calibration, purity algorithms, robust shadows."""

import numpy as np
import pytest

from hamiltonians.spec import parse_spec
from manybody.estimation.calibration import Calibration
from manybody.estimation.driver import estimate, parse_subsystems
from manybody.estimation.kernels import (
    histogram_index,
    histogram_pair_sum,
    local_columns,
    local_products,
    pair_count_sum,
    setting_purity_estimate,
    site_factor_matrix,
    words,
)
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import paulis_on
from manybody.measure.propagation import snapshot_values
from manybody.references import exact
from manybody.references.dataset import reference_dataset
from manybody.simulation.experiment import Noise
from tests.helpers import make_shadow, tfim_model, within


def chain_edges(n):
    return np.array([(i, i + 1) for i in range(n - 1)])




ENSEMBLES = {
    "local": lambda n: LocalEnsemble(n),
    "shallow1": lambda n: ShallowEnsemble(n, 1, chain_edges(n)),
    "shallow3": lambda n: ShallowEnsemble(n, 3, chain_edges(n)),
    "global": lambda n: GlobalEnsemble(n),
}


@pytest.mark.parametrize("name", list(ENSEMBLES))
def test_estimates_within_four_error_bars_of_exact(name):
    # TFIM ground state by exact diagonalization (scipy); the reference values come from
    # the exact state. Every estimate within 4 of its own error bars.
    n = 4 if name == "global" else 6
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    subsystems = parse_subsystems("0;0-1;1,3", n)
    shadow = make_shadow(psi, ENSEMBLES[name](n), 6000, seed=11)
    result = estimate(shadow, model, subsystems)
    ref = reference_dataset(model, psi, subsystems)
    names = ["energy", "energy_density", "energy_variance", "magnetization", "correlation",
             "connected_correlation", "purity", "renyi2", "mutual_information"]
    checked = 0
    for var in names:
        if var not in result:
            continue
        ok, worst = within(result[var], result[var + "_err"], ref[var], blocks=result.attrs["error_blocks"])
        assert ok, f"{var}: worst deviation {worst:.2f} sigma"
        z = ((result[var] - ref[var]) / result[var + "_err"]).values.ravel()
        z = z[np.isfinite(z)]
        # many entries: their spread is that of unit normals, within 4 standard errors of a
        # sample std, plus 0.1 for the correlation between entries (common practice, no source)
        if len(z) >= 50:
            assert abs(z.std() - 1) < 4 / np.sqrt(2 * len(z)) + 0.1, f"{var}: z-score spread {z.std():.2f}"
        checked += 1
    assert checked >= (8 if name == "local" else 7)


def test_ghz_and_maximally_mixed_subsystems():
    # GHZ: any proper subsystem has S2 = ln 2; a qubit of a Bell pair is maximally mixed,
    # so two qubits from two different Bell pairs have purity 2^-2 (facts of the trade).
    n = 6
    ghz = np.zeros(2**n, dtype=complex)
    ghz[[0, -1]] = 2**-0.5
    result = estimate(make_shadow(ghz, LocalEnsemble(n), 20000, seed=2), None, parse_subsystems("0-2;0,4", n))
    assert within(result.renyi2, result.renyi2_err, [np.log(2), np.log(2)])[0]
    bell = np.array([1, 0, 0, 1], dtype=complex) / np.sqrt(2)
    pairs = np.kron(np.kron(bell, bell), bell)
    result = estimate(make_shadow(pairs, LocalEnsemble(n), 20000, seed=3), None, parse_subsystems("0,2;0-1", n))
    assert within(result.purity, result.purity_err, [0.25, 1.0])[0]


def test_purity_algorithms_agree_on_the_same_data():
    # Histogram (6^|A| words) = pair counts (O(N^2)) = Pauli-vector form, to rounding
    # (docs/design.md section 4: the three are the same sum over pairs of snapshots).
    n = 5
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(n), 600, seed=5)
    basis, bits = shadow.settings.basis[shadow.record_setting], shadow.outcomes
    qs = [0, 2, 3]
    w = words(basis[:, qs], bits[:, qs])
    factors = [site_factor_matrix(3.0)] * len(qs)
    hist = np.bincount(histogram_index(w), minlength=6 ** len(qs)).astype(float)
    by_hist = histogram_pair_sum(hist, factors) - len(w) * 5.0 ** len(qs)
    by_pairs = pair_count_sum(w, 3.0)
    codes = paulis_on(qs, n)
    v = np.ones((len(bits), len(codes)))
    for r in range(1, len(codes)):
        v[:, r] = snapshot_values(codes[r], shadow.ensemble, shadow.settings, shadow.record_setting, bits) * 3.0 ** (
            np.count_nonzero(codes[r]))
    total = v.sum(axis=0)
    by_vector = (total @ total - np.sum(v * v)) / 2 ** len(qs)
    assert by_pairs == pytest.approx(by_hist, rel=1e-10)
    assert by_vector == pytest.approx(by_hist, rel=1e-10)


@pytest.mark.parametrize("inv", [3.0, 3.0 * (1 + 0.05 * np.arange(6))], ids=["uniform", "calibrated"])
def test_pair_counts_by_block_leave_out_same_setting_pairs(inv):
    # The definition, pair by pair: tr(rho_i^A rho_j^A) = prod_q F(w_iq, w_jq) with F = (1 + s)/2 for the same
    # basis and outcome, (1 - s)/2 for the same basis and opposite outcomes, 1/2 for different bases,
    # s = 1/lambda_q^2 (Elben et al., PRL 120, 050406 (2018)); pairs of one setting are left out, the sums
    # are split by the blocks of both snapshots. Settings of 4 shots in shuffled record order.
    rng = np.random.default_rng(11)
    n_snap, k = 240, 6
    w = rng.integers(0, 6, size=(n_snap, k))
    setting = rng.permutation(np.repeat(np.arange(n_snap // 4), 4))
    blocks = rng.integers(0, 3, n_snap)
    s = np.broadcast_to(np.asarray(inv, dtype=float) ** 2, (k,))
    expected = np.zeros((3, 3))
    for i in range(n_snap):
        for j in range(n_snap):
            if setting[i] != setting[j]:
                same_o, same_b = w[i] == w[j], w[i] // 2 == w[j] // 2
                expected[blocks[i], blocks[j]] += np.prod(np.where(same_o, (1 + s) / 2,
                                                                   np.where(same_b, (1 - s) / 2, 0.5)))
    got = pair_count_sum(w, inv, chunk=50, exclude=setting, blocks=blocks, n_blocks=3)
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-9 * np.abs(expected).max())


def test_mutual_information_pair_sums_equal_the_word_histogram_of_every_pair():
    # docs/design.md section 4: sum over pairs of snapshots of prod_sites F(w_i, w_j) with the 6x6 factor
    # matrix (5, -4, 1/2; Elben et al., PRL 120, 050406 (2018)) from the histogram of (basis, outcome) words
    # of each site and site pair; the Pauli-vector sums of the one-site columns must give the same numbers.
    from manybody.estimation.pair_sums import mi_pair_sums

    n = 5
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(n), 700, seed=4)
    basis, bits = shadow.settings.basis[shadow.record_setting], shadow.outcomes
    for inv in (3.0, np.array([2.5, 3.0, 2.8, 2.9, 3.0])):  # ideal and calibrated (robust) one-site factors
        cols = local_columns(basis, bits, inv).reshape(len(bits), -1)
        ours = mi_pair_sums({"n": float(len(bits)), "mi_mag": cols.sum(axis=0), "mi_corr": cols.T @ cols}, n)
        inv_q = np.broadcast_to(inv, (n,))
        for a in range(n):
            for b in range(a, n):
                qs = [a] if a == b else [a, b]
                w = words(basis[:, qs], bits[:, qs])
                hist = np.bincount(histogram_index(w), minlength=6 ** len(qs)).astype(float)
                direct = histogram_pair_sum(hist, [site_factor_matrix(inv_q[q]) for q in qs])
                assert ours[a, b] == pytest.approx(direct, rel=1e-12)
                assert ours[b, a] == pytest.approx(direct, rel=1e-12)


def test_per_setting_estimator_agrees_with_cross_setting_u_statistic():
    # Brydges et al., Science 364, 260 (2019): the per-setting (-2)^-D estimator and the
    # cross-setting U-statistic estimate the same purity; both within 4 sigma of exact.
    n = 4
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(n), 300, shots=40, seed=9)
    qs = [0, 1]
    per_setting = [shadow.outcomes[shadow.record_setting == k] for k in range(300)]
    values = np.array([setting_purity_estimate([b], qs) for b in per_setting])
    exact_purity = exact.purity(exact.reduced_density_matrix(psi, qs))
    assert abs(values.mean() - exact_purity) < 4 * values.std(ddof=1) / np.sqrt(len(values))
    result = estimate(shadow, model, parse_subsystems("0-1", n))
    assert result.attrs["several_shots_per_setting"] == 1
    assert within(result.purity, result.purity_err, [exact_purity])[0]


@pytest.mark.parametrize("k", [1, 2, 3])
def test_local_variance_is_three_to_the_weight(k):
    # Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020): Var[o_P] = 3^|P| - <P>^2 for the
    # local ensemble; on |0...0> with P = Z^k, <P> = 1. Within 10%.
    n = 4
    psi = exact.product_state("0" * n)
    shadow = make_shadow(psi, LocalEnsemble(n), 40000, seed=k)
    cols = local_columns(shadow.settings.basis[shadow.record_setting], shadow.outcomes, 3.0)
    values = local_products(cols, np.arange(k)[None, :], np.full((1, k), 2))[:, 0]
    assert values.var() == pytest.approx(3**k - 1, rel=0.10)


def test_depth_one_eigenvalue_of_weight_ten():
    # One brickwork layer aligned with a weight-10 Pauli: five gates, each 1/5
    # (Huang, Kueng, Preskill 2020 two-qubit global value), so 1/lambda = 5^5 = 3125 < 3^10.
    ens = ShallowEnsemble(16, 1, chain_edges(16))
    assert 1 / ens.eigenvalue(list(range(2, 12))) == pytest.approx(5**5)
    assert 1 / LocalEnsemble(16).eigenvalue(np.arange(16) < 10) == pytest.approx(3**10)


def test_robust_shadows_remove_readout_bias():
    # Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021): with readout flips p = 0.05 the
    # plain half-system purity of a 10-qubit GHZ state is biased by more than 6 error bars;
    # calibrated with a |0...0> shadow under the same noise it lies within 4.
    n, p = 10, 0.05
    ghz = np.zeros(2**n, dtype=complex)
    ghz[[0, -1]] = 2**-0.5
    noise = Noise(p01=p, p10=p)
    ens = LocalEnsemble(n)
    data = make_shadow(ghz, ens, 40000, seed=21, noise=noise)
    cal = Calibration(make_shadow(exact.product_state("0" * n), ens, 40000, seed=22, noise=noise))
    sub = parse_subsystems("0-4", n)
    plain = estimate(data, None, sub, mutual_information=False)
    robust = estimate(data, None, sub, calibration=cal, mutual_information=False)
    assert abs(float(plain.purity[0]) - 0.5) > 6 * float(plain.purity_err[0])
    assert abs(float(robust.purity[0]) - 0.5) < 4 * float(robust.purity_err[0])


def coverage(repetitions, seed0):
    n = 4
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    sub = parse_subsystems("0-1", n)
    ref = reference_dataset(model, psi, sub)
    hits = {"energy": [], "correlation": [], "purity": []}
    for r in range(repetitions):
        res = estimate(make_shadow(psi, LocalEnsemble(n), 2000, seed=seed0 + r), model, sub,
                       mutual_information=False)
        hits["energy"].append(abs(float(res.energy - ref.energy)) < 2 * float(res.energy_err))
        c = res.correlation.sel(axis_a="Z", axis_b="Z", site_a=1, site_b=2)
        hits["correlation"].append(abs(float(c - ref.correlation.sel(axis_a="Z", axis_b="Z", site_a=1, site_b=2)))
                                   < 2 * float(res.correlation_err.sel(axis_a="Z", axis_b="Z", site_a=1, site_b=2)))
        hits["purity"].append(abs(float(res.purity[0] - ref.purity[0])) < 2 * float(res.purity_err[0]))
    return {k: float(np.mean(v)) for k, v in hits.items()}


def test_error_bars_calibrated_fast():
    # About 95% of estimates within two error bars. 40 repetitions: the binomial spread of
    # the fraction is sqrt(0.95 * 0.05 / 40) = 0.034, so a 4-sigma window is [0.81, 1].
    for name, fraction in coverage(40, 1000).items():
        assert fraction >= 0.81, name


@pytest.mark.slow
def test_error_bars_calibrated():
    # Independent shadows: the fraction within two error bars lies in [0.92, 0.98]. Jackknife
    # errors from 20 blocks make the ratio a Student t with 19 degrees of freedom, whose
    # two-sigma coverage is 0.94, not 0.954; 1000 repetitions (binomial sigma 0.007) make the
    # window at least 2.8 sigma wide on either side of that.
    for name, fraction in coverage(1000, 5000).items():
        assert 0.92 <= fraction <= 0.98, (name, fraction)


def test_structure_factor_of_periodic_chain():
    # Static structure factor S(q) = (1/n) sum_ab e^(iq(r_a - r_b)) <s_a s_b> on q = 2 pi m / L.
    # Facts of the trade: sum_q S(q) = n (each diagonal term is 1), and for the ferromagnetic
    # TFIM ground state the ZZ structure factor peaks at q = 0. Estimate within 4 sigma.
    spec = '[lattice]\nkind = "chain"\nsize = [6]\nboundary = "periodic"\n[model]\nkind = "tfim"\nh = 0.5\n'
    model = parse_spec(spec).build()
    _, psi = exact.ground_state(model.hamiltonian)
    ref = reference_dataset(model, psi)
    sz = ref.structure_factor.sel(axis="Z")
    assert float(sz.sum()) == pytest.approx(6.0)
    assert int(sz.argmax()) == 0 and float(ref.qx[0]) == 0.0
    result = estimate(make_shadow(psi, LocalEnsemble(6), 6000, seed=4), model, [])
    assert within(result.structure_factor, result.structure_factor_err, ref.structure_factor)[0]


def depth_errors(depths, n=8, snapshots=20000):
    """Standard errors of the nearest-neighbour ZZ and of a contiguous weight-6 Z string on |0...0>.

    Weight 6 rather than 10: the sample spread of a weight-10 estimate needs N >> 3^10 snapshots
    at depth 0 to be seen at all; weight 6 shows the same ordering at N = 2e4.
    """
    psi = exact.product_state("0" * n)
    nn = np.zeros(n, np.uint8)
    nn[[3, 4]] = 2
    w10 = np.zeros(n, np.uint8)
    w10[2:8] = 2  # aligned with the first brickwork layer, like the weight-10 case above
    out = {}
    for d in depths:
        ens = ShallowEnsemble(n, d, chain_edges(n))
        sh = make_shadow(psi, ens, snapshots, seed=30 + d)
        errs = []
        for codes in (nn, w10):
            v = snapshot_values(codes, ens, sh.settings, sh.record_setting, sh.outcomes) / ens.eigenvalue(codes != 0)
            errs.append(v.std(ddof=1) / np.sqrt(len(v)))
        out[d] = errs
    return out


def test_depth_trade_off_predicted_by_eigenvalues():
    # Per-snapshot variance 1/lambda - <P>^2 (docs/design.md section 6): deeper circuits lower lambda of a
    # nearest-neighbour pair but raise it for a contiguous weight-10 string (fast sibling of the test below).
    chain = chain_edges(12)
    nn = [ShallowEnsemble(12, d, chain).eigenvalue([5, 6]) for d in (0, 1, 2, 3)]
    w10 = [ShallowEnsemble(12, d, chain).eigenvalue(list(range(1, 11))) for d in (0, 1, 2)]
    assert nn[0] > nn[2] > nn[3]
    assert w10[1] > w10[0] and w10[2] > w10[0]


@pytest.mark.slow
def test_depth_trade_off_observed():
    # Same budget at depths 0..2: the observed error of the nearest-neighbour correlation grows with
    # depth, that of a long string (weight 6 of 8) is smaller at depths 1 and 2 than at depth 0.
    errs = depth_errors((0, 1, 2))
    assert errs[0][0] < errs[2][0]
    assert errs[1][1] < errs[0][1] and errs[2][1] < errs[0][1]


def test_profile_subsystems():
    subs = parse_subsystems("profile", 8)
    assert [s.label for s in subs] == ["0", "0-1", "0-2", "0-3"]
    assert [s.sites for s in subs][-1] == (0, 1, 2, 3)


def test_non_positive_purity_gives_nan_with_warning():
    from manybody.estimation.accumulators.purity import renyi2

    with pytest.warns(RuntimeWarning, match="purity estimate"):
        s2, err = renyi2(np.array([-0.01, 0.5]), np.array([0.1, 0.1]))
    assert np.isnan(s2[0]) and np.isnan(err[0]) and s2[1] == pytest.approx(np.log(2))


@pytest.mark.parametrize("method", ["median-of-means", "analytic"])
def test_other_error_methods(method):
    # Median-of-means (Huang, Kueng, Preskill 2020) and the analytic standard error of a mean:
    # the energy lies within 4 error bars, and with one shot per setting the error bars agree
    # with the jackknife's within 30% (20 blocks: ~16% noise on each), the median's error being
    # sqrt(pi/2) times that of the mean (asymptotic efficiency of the median, a fact of the trade).
    n = 6
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(n), 8000, seed=17)
    ref = reference_dataset(model, psi)
    other = estimate(shadow, model, [], method=method, correlations=False, mutual_information=False)
    jack = estimate(shadow, model, [], correlations=False, mutual_information=False)
    assert other.attrs["error_method"] == method
    assert within(other.energy, other.energy_err, ref.energy)[0]
    factor = np.sqrt(np.pi / 2) if method == "median-of-means" else 1.0
    assert float(other.energy_err) == pytest.approx(factor * float(jack.energy_err), rel=0.3)
