"""The purity accumulator for circuit ensembles: large subsystems, profiles in one pass, settings split by chunks."""

import warnings

import numpy as np
import pytest

from manybody.estimation.accumulators.purity import covering_subsystems
from manybody.estimation.driver import estimate
from manybody.estimation.setup import parse_subsystems
from manybody.measure.ensembles import GlobalEnsemble, ShallowEnsemble
from manybody.references import exact
from tests.helpers import chain, make_shadow, within


def ghz(n):
    psi = np.zeros(2**n)
    psi[0] = psi[-1] = 2**-0.5
    return psi


def test_covers_nest_subsystems():
    qubits = [np.array(q) for q in ([0], [0, 1], [0, 1, 2], [3, 4], [1, 2])]
    covers, members = covering_subsystems(qubits)
    assert [c.tolist() for c in covers] == [[0, 1, 2], [3, 4]]
    patterns = dict(m for group in members for m in group)
    assert patterns == {0: 0b001, 1: 0b011, 2: 0b111, 3: 0b11, 4: 0b110}


def test_profile_in_one_pass_equals_subsystems_one_by_one():
    # The same estimator on the same snapshots, restricted from the largest subsystem or computed alone.
    n = 8
    shadow = make_shadow(ghz(n), ShallowEnsemble(n, 2, chain(n)), 3000, seed=3)
    together = estimate(shadow, None, parse_subsystems("0;0-1;0-2;0-3", n), quantities=("purity",))
    for label in ("0", "0-1", "0-2", "0-3"):
        alone = estimate(shadow, None, parse_subsystems(label, n), quantities=("purity",))
        assert np.allclose(together.purity.sel(subsystem=label), alone.purity.values[0], rtol=1e-10, atol=1e-12)
        assert np.allclose(together.purity_err.sel(subsystem=label), alone.purity_err.values[0], rtol=1e-8)


def test_settings_split_across_chunks_give_the_same_sums():
    # Several shots per setting: pairs within a setting are left out, whatever the chunk boundaries.
    n = 6
    shadow = make_shadow(ghz(n), ShallowEnsemble(n, 1, chain(n)), 200, shots=7, seed=5)
    subsystems = parse_subsystems("0-2;1,4", n)
    whole = estimate(shadow, None, subsystems, quantities=("purity",), chunk=1 << 14)
    pieces = estimate(shadow, None, subsystems, quantities=("purity",), chunk=5)
    assert np.allclose(whole.purity.values, pieces.purity.values, rtol=1e-12)
    assert np.allclose(whole.purity_err.values, pieces.purity_err.values, rtol=1e-10)


@pytest.mark.parametrize("ens", [ShallowEnsemble(7, 2, chain(7)), GlobalEnsemble(7)], ids=["shallow2", "global"])
def test_ghz_half_system_entropy_is_ln2(ens):
    # Any cut of a GHZ state: S2 = ln 2 (a fact of the trade), here for several shots per setting.
    n = 7
    shadow = make_shadow(ghz(n), ens, 800, shots=4, seed=9)
    result = estimate(shadow, None, parse_subsystems("0-2;0,3,5;1-3", n), quantities=("purity",))
    ok, worst = within(result.purity.values, result.purity_err.values, np.full(3, 0.5), blocks=20)
    assert ok, worst


def test_ten_qubit_subsystem_from_shallow_shadows_matches_the_exact_purity():
    # Exact purity of the state's 10-qubit reduced density matrix (numpy) vs depth-2 shadows of a
    # 12-qubit chain ground state; beyond the old 6-qubit limit of circuit-ensemble purities.
    from tests.helpers import tfim_model

    n = 12
    _, psi = exact.ground_state(tfim_model(n).hamiltonian)
    qubits = list(range(1, 11))
    reference = exact.purity(exact.reduced_density_matrix(psi, qubits))
    shadow = make_shadow(psi, ShallowEnsemble(n, 2, chain(n)), 600, shots=50, seed=12)
    result = estimate(shadow, None, parse_subsystems("1-10;1-4", n), quantities=("purity",))
    small = exact.purity(exact.reduced_density_matrix(psi, [1, 2, 3, 4]))
    ok, worst = within(result.purity.values, result.purity_err.values, [reference, small])
    assert ok, worst


@pytest.mark.parametrize("shots", [1, 10])
def test_circuit_mutual_information_map_with_one_or_many_shots(shots):
    # Exact I2 of every site pair from numpy reduced density matrices of the scipy ground state;
    # with several shots per setting the pairs within a setting are left out.
    from tests.helpers import tfim_model

    n = 6
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    single = [exact.purity(exact.reduced_density_matrix(psi, [q])) for q in range(n)]
    mi = np.full((n, n), np.nan)
    for a in range(n):
        for b in range(n):
            if a != b:
                mi[a, b] = np.log(exact.purity(exact.reduced_density_matrix(psi, [a, b])) / single[a] / single[b])
    shadow = make_shadow(psi, ShallowEnsemble(n, 1, chain(n)), 20000 // shots, shots=shots, seed=3)
    result = estimate(shadow, model, quantities=("mutual_information",))
    ok, worst = within(result.mutual_information.values, result.mutual_information_err.values, mi, blocks=20)
    assert ok, worst
    # the distance profile: mean I2 over the pairs at each distance (a chain: |a - b|)
    by_distance = [np.nanmean([mi[a, a + d] for a in range(n - d)] + [mi[a + d, a] for a in range(n - d)])
                   for d in range(1, n)]
    assert list(result.distance.values) == [1, 2, 3, 4, 5]
    ok, worst = within(result.mutual_information_distance.values, result.mutual_information_distance_err.values,
                       by_distance, blocks=20)
    assert ok, worst


def test_long_pair_count_pass_is_announced_before_it_starts(monkeypatch):
    # our own behaviour (no outside source): local purities of more than 8 sites cost N^2 pairs; beyond
    # PAIR_COUNT_NOTICE pairs a warning says so before the pass (the threshold lowered to see it here)
    from manybody.estimation.accumulators import purity
    from manybody.measure.ensembles import LocalEnsemble

    n = 10
    psi = np.zeros(2**n)
    psi[0] = 1.0
    shadow = make_shadow(psi, LocalEnsemble(n), 300, seed=4)
    monkeypatch.setattr(purity, "PAIR_COUNT_NOTICE", 1e4)
    with pytest.warns(RuntimeWarning, match=r"purities of 0-9 .* 4\.5e\+04 pairs"):
        estimate(shadow, None, parse_subsystems("0-9;0-3", n), quantities=("purity",))
    monkeypatch.setattr(purity, "PAIR_COUNT_NOTICE", 1e5)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        estimate(shadow, None, parse_subsystems("0-9", n), quantities=("purity",))
