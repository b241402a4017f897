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
    # 050406 (2018) use the same Renyi-2 entropies), from the same snapshots as the purity map.
    n = 4
    model, psi = _tfim_state(n)
    shadow = make_shadow(psi, LocalEnsemble(n), 3000, seed=2)
    from manybody.estimation.driver import parse_subsystems

    result = estimate(shadow, model, parse_subsystems("1;2;1,2", n), quantities=("purity", "mutual_information"))
    s2 = -np.log(result.purity.values)
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
