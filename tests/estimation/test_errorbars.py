"""Error bars: entries no setting measured, the jackknife of nonlinear estimators, calibration noise."""

import warnings

import numpy as np
import pytest

from manybody.estimation.driver import estimate
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import BASIS_PAULI
from manybody.measure.propagation import snapshot_values
from manybody.references import exact
from tests.helpers import chain, make_shadow, tfim_model


def _tfim_state(n):
    model = tfim_model(n)
    return model, exact.ground_state(model.hamiltonian)[1]


def test_unmeasured_correlations_are_nan_with_warning():
    # 50 local settings of 8 qubits: a given axis pair on a given qubit pair is missed with
    # probability (8/9)^50 = 0.3% per entry, so among 8 x 7 x 9 ordered entries a few are missed.
    # The missing set is counted here directly from the settings' bases (a fact of the trade:
    # the local estimator of sigma^x_a sigma^y_b is nonzero only when both bases match).
    n = 8
    model, psi = _tfim_state(n)
    off = ~np.eye(n, dtype=bool)
    for seed in range(100):  # the first seed whose 50 settings miss an entry
        shadow = make_shadow(psi, LocalEnsemble(n), 50, shots=20, seed=seed)
        measured = np.zeros((3, 3, n, n), dtype=bool)
        for row in shadow.settings.basis:
            measured[row[:, None], row[None, :], np.arange(n)[:, None], np.arange(n)[None, :]] = True
        missing = ~measured & off
        if missing.any():
            break
    assert missing.any()
    with pytest.warns(RuntimeWarning, match="measured by no setting"):
        result = estimate(shadow, model, quantities=("correlations",), mutual_information=False)
    corr, err = result.correlation.values, result.correlation_err.values
    assert np.array_equal(np.isnan(corr) & off, missing)
    assert np.array_equal(np.isnan(err) & off, missing)
    assert np.all(np.isnan(result.connected_correlation.values[missing]))
    assert result.correlation.attrs["unmeasured_entries"] == int(missing.sum())
    # every measured entry keeps a finite estimate and error
    assert np.all(np.isfinite(corr[measured & off])) and np.all(np.isfinite(err[measured & off]))


def test_fully_measured_correlations_carry_no_warning():
    n = 4
    model, psi = _tfim_state(n)
    shadow = make_shadow(psi, LocalEnsemble(n), 2000, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        result = estimate(shadow, model, quantities=("correlations",), mutual_information=False)
    assert result.correlation.attrs["unmeasured_entries"] == 0
    assert np.isfinite(result.magnetization.values).all()


def test_unmeasured_entries_of_a_shallow_shadow_follow_the_snapshot_values():
    # Circuit ensembles: an entry is measured when some snapshot's value is nonzero; counted here
    # by propagating every two-site Pauli through every setting (manybody.measure.propagation).
    n = 5
    model, psi = _tfim_state(n)
    ens = ShallowEnsemble(n, 1, chain(n))
    shadow = make_shadow(psi, ens, 12, seed=5)
    positions, bits = shadow.snapshots()
    missing = np.zeros((3, 3, n, n), dtype=bool)
    for a in range(n):
        for b in range(n):
            if a == b:
                continue
            for x in range(3):
                for y in range(3):
                    c = np.zeros(n, np.uint8)
                    c[a], c[b] = BASIS_PAULI[x], BASIS_PAULI[y]
                    missing[x, y, a, b] = not np.any(snapshot_values(c, ens, shadow.settings, positions, bits))
    assert missing.any()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        result = estimate(shadow, model, quantities=("correlations",), mutual_information=False)
    off = ~np.eye(n, dtype=bool)
    assert np.array_equal(np.isnan(result.correlation.values) & off, missing)


def test_mutual_information_is_the_renyi2_combination_of_the_purities():
    # I2(a:b) = S2(a) + S2(b) - S2(ab) with S2 = -ln tr rho^2 (definition; Elben et al., PRL 120,
    # 050406 (2018) use the same Renyi-2 entropies), from the same snapshots as the purity map. The
    # jackknife bias correction is linear in the replicates, so it commutes with this sum.
    n = 4
    model, psi = _tfim_state(n)
    shadow = make_shadow(psi, LocalEnsemble(n), 3000, seed=2)
    from manybody.estimation.driver import parse_subsystems

    result = estimate(shadow, model, parse_subsystems("1;2;1,2", n), quantities=("purity", "mutual_information"))
    s2 = result.renyi2.values
    assert np.isclose(result.mutual_information.values[1, 2], s2[0] + s2[1] - s2[2], rtol=1e-9)


def test_mutual_information_error_matches_the_spread_of_repetitions():
    # The jackknife of I2 itself includes the covariances of the three purities. Over R = 30
    # independent repetitions the sample standard deviation has relative precision
    # 1/sqrt(2 (R - 1)) = 0.13, so the mean reported error must match it within 3 of that (0.6-1.4).
    n = 4
    model, psi = _tfim_state(n)
    est, err = [], []
    for r in range(30):
        result = estimate(make_shadow(psi, LocalEnsemble(n), 600, seed=500 + r), model,
                          quantities=("mutual_information",))
        est.append(result.mutual_information.values[0, 1])
        err.append(result.mutual_information_err.values[0, 1])
    ratio = np.mean(err) / np.std(est, ddof=1)
    assert 0.6 < ratio < 1.4, ratio


def _calibrated_coverage(repetitions, seed0, n_snap=2000):
    """Fraction of robust estimates within two error bars, calibration as large as the experiment."""
    from manybody.estimation.calibration import Calibration
    from manybody.estimation.driver import parse_subsystems
    from manybody.references.dataset import reference_dataset
    from manybody.simulation.noise import Noise

    n = 4
    model, psi = _tfim_state(n)
    sub = parse_subsystems("0-1;1-3", n)
    ref = reference_dataset(model, psi, sub)
    noise = Noise(p01=0.08, p10=0.08)
    ens = LocalEnsemble(n)
    zero = exact.product_state("0" * n)
    hits = {"purity2": [], "purity3": [], "renyi2": [], "energy": [], "zz": []}
    for r in range(repetitions):
        cal = Calibration(make_shadow(zero, ens, n_snap, seed=seed0 + 2 * r + 1, noise=noise))
        res = estimate(make_shadow(psi, ens, n_snap, seed=seed0 + 2 * r, noise=noise), model, sub, calibration=cal,
                       mutual_information=False)
        for key, var, idx in (("purity2", "purity", (0,)), ("purity3", "purity", (1,)), ("renyi2", "renyi2", (1,)),
                              ("energy", "energy", ()), ("zz", "correlation", (2, 2, 1, 2))):
            hits[key].append(abs(res[var].values[idx] - ref[var].values[idx]) < 2 * res[var + "_err"].values[idx])
    return {k: float(np.mean(v)) for k, v in hits.items()}


def test_calibration_noise_in_error_bars():
    # Robust shadows (Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021)) with a calibration as
    # large as the experiment: the calibration's own scatter is in the error bars, so about 95% of
    # the estimates lie within two of them. 40 repetitions: binomial sigma sqrt(0.95 * 0.05 / 40) =
    # 0.034, so a 4-sigma lower bound of 0.81 (without the calibration's noise, purities reach ~0.72).
    for name, fraction in _calibrated_coverage(40, 300).items():
        assert fraction >= 0.81, (name, fraction)


def _local_purity(shadow, text):
    """The purity accumulator fed by hand: its within-setting and cross-setting estimates on the totals."""
    from manybody.estimation.accumulators.purity import LocalPurity
    from manybody.estimation.driver import _setup, parse_subsystems
    from manybody.estimation.setup import Chunk

    setup, counts = _setup(shadow, None, parse_subsystems(text, shadow.ensemble.n_qubits), None, 20, 1 << 14)
    acc = LocalPurity(setup)
    for pos, bits, _ in shadow.chunks(1 << 14):
        acc.add(Chunk(setup, pos, bits))
    acc.finish()
    totals = {k: v.sum(axis=0) for k, v in {**counts, **acc.sums.data}.items()}
    return acc, acc.estimates(totals), counts


def test_within_setting_purity_is_the_brydges_estimator():
    # Brydges et al., Science 364, 260 (2019): per setting 2^|A| sum_{s != s'} (-2)^(-D) / (M (M - 1)),
    # averaged over settings; kernels.setting_purity_estimate is a direct transcription of that formula.
    from manybody.estimation.kernels import setting_purity_estimate

    n = 5
    _, psi = _tfim_state(n)
    shadow = make_shadow(psi, LocalEnsemble(n), 40, shots=30, seed=9)
    _, est, _ = _local_purity(shadow, "1-3")
    positions, bits = shadow.snapshots()
    per_setting = [bits[positions == k] for k in range(len(shadow.settings))]
    assert est["purity_within"][0] == pytest.approx(setting_purity_estimate(per_setting, [1, 2, 3]), rel=1e-10)


def test_many_shots_favour_the_within_setting_purity():
    # 50 settings x 200 shots of a 6-site TFIM ground state: the within-setting estimator scatters
    # less (Brydges et al. 2019), so it takes most of the weight and the combined error is below the
    # cross-setting one; both estimators agree with the exact purity (scipy ED) within 4 sigma.
    from manybody.estimation.driver import parse_subsystems
    from manybody.estimation.errorbars import jackknife
    from manybody.references.dataset import reference_dataset

    n = 6
    model, psi = _tfim_state(n)
    shadow = make_shadow(psi, LocalEnsemble(n), 50, shots=200, seed=4)
    acc, _, counts = _local_purity(shadow, "2-3")
    full, err = jackknife(acc.estimates, {**counts, **acc.sums.data})
    combined, combined_err = acc.errors(counts, "jackknife")
    exact_p = float(reference_dataset(model, psi, parse_subsystems("2-3", n)).purity[0])
    assert acc.within_weight[0] > 0.5
    assert combined_err["purity"][0] < err["purity"][0]
    for value, sigma in ((full["purity"][0], err["purity"][0]), (full["purity_within"][0], err["purity_within"][0]),
                         (combined["purity"][0], combined_err["purity"][0])):
        assert abs(value - exact_p) < 4 * sigma


def _shallow_noisy(n_snap, seed):
    from manybody.measure.prepare import coupling_of
    from manybody.simulation.noise import Noise

    model, psi = _tfim_state(4)
    ens = ShallowEnsemble(4, 1, coupling_of(model))
    noise = Noise(p01=0.08, p10=0.08)
    return model, psi, ens, make_shadow(psi, ens, n_snap, seed=seed, noise=noise), noise


def test_circuit_calibration_noise_is_the_jackknife_over_calibration_blocks():
    # Delta method (docs/design.md section 5) against its definition: a large experiment (its own
    # scatter negligible) with a small calibration, so that the error bar is the calibration's.
    # The brute force rebuilds the calibration without each of its 20 blocks of settings and
    # re-estimates; the delete-one-block jackknife variance of those estimates (Efron & Tibshirani,
    # An Introduction to the Bootstrap (1993), ch. 11) must match the reported error within 10%
    # (the delta method is first order in the calibration's scatter; 400 snapshots keep it small).
    from manybody.estimation.calibration import Calibration

    model, _, ens, data, noise = _shallow_noisy(40000, seed=1)
    cal_shadow = make_shadow(exact.product_state("0000"), ens, 400, seed=2, noise=noise)
    quantities = ("energy", "correlations")
    robust = estimate(data, model, [], calibration=Calibration(cal_shadow), quantities=quantities,
                      mutual_information=False)
    blocks = np.arange(400) * 20 // 400
    loo = []
    for b in range(20):
        keep = blocks != b
        part = cal_shadow.with_records(cal_shadow.record_setting[keep], cal_shadow.outcomes[keep],
                                       cal_shadow.counts[keep])
        loo.append(estimate(data, model, [], calibration=Calibration(part), quantities=quantities,
                            mutual_information=False))
    for var, idx in (("energy", ()), ("correlation", (2, 2, 1, 2)), ("correlation", (0, 0, 0, 3)),
                     ("magnetization", (0, 1))):
        values = np.array([r[var].values[idx] for r in loo])
        brute = np.sqrt(19 / 20 * np.sum((values - values.mean()) ** 2))
        assert float(robust[var + "_err"].values[idx]) == pytest.approx(brute, rel=0.10), var


@pytest.mark.slow
def test_circuit_calibration_coverage():
    # Robust shallow shadows (Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021)), calibration as
    # large as the experiment: 200 repetitions, each estimate within two error bars 90-98.5% of the
    # time (the acceptance window of this project, no external source), widened by 2.5 binomial
    # sigmas (common practice, no source). Without the calibration's noise the energy reached 0.855.
    from manybody.estimation.calibration import Calibration
    from manybody.references.dataset import reference_dataset

    model, psi, ens, _, noise = _shallow_noisy(10, seed=0)
    ref = reference_dataset(model, psi, [])
    picks = (("energy", ()), ("correlation", (2, 2, 1, 2)), ("correlation", (0, 0, 0, 1)),
             ("correlation", (2, 2, 0, 3)), ("magnetization", (0, 1)))
    hits = np.zeros((200, len(picks)), dtype=bool)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        for r in range(200):
            cal = Calibration(make_shadow(exact.product_state("0000"), ens, 2000, seed=10001 + 2 * r, noise=noise))
            res = estimate(_shallow_noisy(2000, seed=10000 + 2 * r)[3], model, [], calibration=cal,
                           mutual_information=False)
            hits[r] = [abs(res[v].values[i] - ref[v].values[i]) < 2 * res[v + "_err"].values[i] for v, i in picks]
    slack = 2.5 * np.sqrt(0.9 * 0.1 / 200)
    for (var, idx), rate in zip(picks, hits.mean(axis=0)):
        assert 0.90 - slack <= rate <= 0.985 + slack, (var, idx, rate)
