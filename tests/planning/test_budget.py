"""The budget planner against the observed spread of estimates."""

import numpy as np
import pytest

from hamiltonians.spec import parse_spec
from manybody.estimation.driver import estimate
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.measure.prepare import coupling_of
from manybody.planning.budget import energy_variance_bound, energy_variance_with_expectations, plan
from manybody.references import exact
from tests.helpers import make_shadow

SPEC = '[lattice]\nkind = "chain"\nsize = [6]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 0.8\n'


def setup():
    model = parse_spec(SPEC).build()
    _, psi = exact.ground_state(model.hamiltonian)
    return model, psi, (lambda op: exact.pauli_expectations(op, psi))


def test_worst_case_bounds_the_state_variance():
    model, psi, expectation = setup()
    ham = model.hamiltonian.combined()
    for ens in (LocalEnsemble(6), ShallowEnsemble(6, 2, coupling_of(model))):
        assert energy_variance_with_expectations(ham, ens, expectation) <= energy_variance_bound(ham, ens)


@pytest.mark.slow
def test_predicted_errors_match_observed_spread():
    # 50 independent shadows per depth, N = 1500 snapshots: the standard deviation of the
    # estimates matches the planner's prediction sqrt(var / N) within 25% for the
    # nearest-neighbour ZZ correlation (exact per-snapshot variance 1/lambda - <P>^2,
    # docs/design.md section 6) and for the energy (covariances between terms included) at depths 0-2.
    model, psi, expectation = setup()
    n_snap, eps = 1500, 0.1
    ds = plan(model, eps, depths=(0, 1, 2), distance=1, expectation=expectation, shots=1)
    zz = np.zeros(6, np.uint8)
    zz[[2, 3]] = 2
    for i, depth in enumerate((0, 1, 2)):
        ens = LocalEnsemble(6) if depth == 0 else ShallowEnsemble(6, depth, coupling_of(model))
        energies, corr = [], []
        for r in range(50):
            res = estimate(make_shadow(psi, ens, n_snap, seed=100 * depth + r), model, [],
                           mutual_information=False)
            energies.append(float(res.energy))
            corr.append(float(res.correlation.sel(axis_a="Z", axis_b="Z", site_a=2, site_b=3)))
        lam = ens.eigenvalue(zz != 0)
        p = float(expectation(__import__("hamiltonians").PauliExpansion.from_strings("IIZZII"))[0])
        predicted_corr = np.sqrt((1 / lam - p**2) / n_snap)
        assert np.std(corr, ddof=1) == pytest.approx(predicted_corr, rel=0.25)
        predicted_energy = np.sqrt(ds.energy.values[i] * eps**2 / n_snap)
        assert np.std(energies, ddof=1) == pytest.approx(predicted_energy, rel=0.25)


def test_shots_of_one_setting_are_not_independent():
    # Var of the K-shot setting mean = <P>^2 (1/lambda - 1) + (1 - <P>^2)/(lambda K) (docs/design.md
    # section 6). A weight-2 local Pauli (lambda = 1/9) with <P> = 0.8 at K = 100: per setting
    # 0.64 * 8 + 0.36 * 9/100 = 5.1524, against (9 - 0.64)/100 = 0.0836 if the shots were independent.
    from manybody.planning.budget import pauli_setting_variance

    assert pauli_setting_variance(1 / 9, 100, 0.8) == pytest.approx(5.1524)
    assert pauli_setting_variance(1 / 9, 1, 0.8) == pytest.approx(9 - 0.64)  # 1/lambda - <P>^2 at K = 1
    assert pauli_setting_variance(1 / 9, 100, 0.8) / ((9 - 0.64) / 100) == pytest.approx(61.6, abs=0.1)


def test_plan_never_recommends_what_estimate_refuses():
    # Circuit-ensemble purities are capped by the purity accumulator; a subsystem above the cap is
    # refused at depth > 0, so the plan must recommend the local ensemble (depth 0).
    from manybody.estimation.accumulators.purity import PAULI_VECTOR_MAX_QUBITS
    from manybody.estimation.driver import parse_subsystems

    n = PAULI_VECTOR_MAX_QUBITS + 2
    spec = f'[lattice]\nkind = "chain"\nsize = [{n}]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 0.8\n'
    model = parse_spec(spec).build()
    ds = plan(model, 0.5, depths=(0, 1), subsystems=parse_subsystems(f"0-{n - 1}", n), shots=1)
    assert np.isinf(ds.purity.values[1]) and np.isfinite(ds.purity.values[0])
    assert ds.attrs["recommended_depth"] == 0


def test_cost_model_picks_many_shots_when_settings_are_expensive():
    # Pilot = exact expectations: the energy's between-setting variance is well below the
    # per-snapshot one, so expensive setting changes favour many shots per setting.
    model, psi, expectation = setup()
    cheap = plan(model, 0.05, depths=(0,), expectation=expectation, setting_time=1e-4, shot_time=1e-3)
    dear = plan(model, 0.05, depths=(0,), expectation=expectation, setting_time=10.0, shot_time=1e-3)
    assert cheap.shots.values[0] == 1 and dear.shots.values[0] > 10
    assert dear.time.values[0] == pytest.approx(dear.settings.values[0] * (10.0 + dear.shots.values[0] * 1e-3))


def _observed_vs_planned(depth, shots, settings, repetitions, seed0=0):
    """(observed, predicted) standard deviations of the energy and of <Z2 Z3> over repetitions.

    Also run with many repetitions by benchmarks/bench_planner_accuracy.py (``seed0`` there: other seeds).
    """
    from hamiltonians import PauliExpansion
    from manybody.planning.budget import pauli_setting_variance

    model, psi, expectation = setup()
    eps = 0.01  # small, so that the ceilings of the table do not matter
    ds = plan(model, eps, depths=(depth,), expectation=expectation, shots=shots)
    ens = LocalEnsemble(6) if depth == 0 else ShallowEnsemble(6, depth, coupling_of(model))
    energies, corr = [], []
    for r in range(repetitions):
        shadow = make_shadow(psi, ens, settings, shots=shots, seed=seed0 + 1000 * depth + 10 * shots + r)
        res = estimate(shadow, model, [], quantities=("energy", "correlations"), mutual_information=False)
        energies.append(float(res.energy))
        corr.append(float(res.correlation.sel(axis_a="Z", axis_b="Z", site_a=2, site_b=3)))
    zz = np.zeros(6, np.uint8)
    zz[[2, 3]] = 2
    p = float(expectation(PauliExpansion.from_strings("IIZZII"))[0])
    predicted_corr = np.sqrt(pauli_setting_variance(ens.eigenvalue(zz != 0), shots, p) / settings)
    predicted_energy = np.sqrt(ds.energy.values[0] / shots * eps**2 / settings)
    return (np.std(energies, ddof=1), predicted_energy), (np.std(corr, ddof=1), predicted_corr)


@pytest.mark.parametrize("depth", [0, 1, 2])
@pytest.mark.parametrize("shots,settings", [(1, 1500), (20, 150), (200, 100)])
@pytest.mark.slow
def test_predicted_setting_errors_match_observed_spread(depth, shots, settings):
    # 50 independent shadows: the observed standard deviation of the energy and of a ZZ
    # correlation against the planner's setting-level prediction. Target: within 20%; the
    # test bound is the larger of 20% and 3.5 standard errors of a sample standard deviation
    # of R = 50 normal values, 3.5 / sqrt(2 (R - 1)) = 35% (18 comparisons; common practice, no source).
    rel = max(0.20, 3.5 / np.sqrt(2 * 49))
    for observed, predicted in _observed_vs_planned(depth, shots, settings, 50):
        assert observed == pytest.approx(predicted, rel=rel)


def test_predicted_setting_errors_fast():
    rel = 3.5 / np.sqrt(2 * 29)
    for observed, predicted in _observed_vs_planned(0, 100, 60, 30):
        assert observed == pytest.approx(predicted, rel=rel)
