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
    ds = plan(model, eps, depths=(0, 1, 2), distance=1, expectation=expectation)
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
