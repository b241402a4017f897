"""User-defined observables: parsing, estimates against exact values, depth beating depth 0 on long strings."""

import warnings
from functools import reduce

import numpy as np
import pytest

from hamiltonians.pauli import PauliExpansion
from manybody.errors import InputError
from manybody.estimation.driver import estimate
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.observables import load_observables, observables_from, parse_observable
from manybody.references import exact
from tests.helpers import chain, make_shadow, tfim_model, within

SIGMA = {"X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]), "Z": np.diag([1.0, -1.0])}


def dense_operator(observable, n):
    """The observable as a 2^n matrix from numpy Kronecker products (qubit 0 most significant)."""
    out = np.zeros((2**n, 2**n), dtype=complex)
    for c, factors in observable.terms:
        letters = dict(factors)
        out += c * reduce(np.kron, [SIGMA[letters[q]] if q in letters else np.eye(2) for q in range(n)])
    return out


def ghz(n):
    psi = np.zeros(2**n)
    psi[0] = psi[-1] = 2**-0.5
    return psi


def test_text_forms_and_canonical_expressions():
    o = parse_observable("hop = 0.5*X0 X1 + 0.5 Y0*Y1 - 2")
    assert o.name == "hop"
    assert o.expression == "0.5*X0 X1 + 0.5*Y0 Y1 - 2"
    assert parse_observable(o.name + "=" + o.expression) == o
    op = o.expansion(3)
    assert sorted(op.strings()) == ["III", "XXI", "YYI"]
    assert parse_observable("s=Z3 Z1").expansion(4).strings() == ["IZIZ"]


@pytest.mark.parametrize("text, message", [
    ("a=Z0 Z0", "qubit 0 appears twice"),
    ("a=", "empty"),
    ("a=Z0 +", "ends with a sign"),
    ("a=Q1", "cannot read 'Q1'"),
    ("a=Z0 2", "one coefficient per product"),
    ("a=Z0 * - Z1", "sign right after"),
    ("Z0 Z1", "expected 'name=expression'"),
    ("2a=Z0", "must start with a letter"),
])
def test_bad_text_is_one_sentence_naming_the_observable(text, message):
    with pytest.raises(InputError, match=message) as info:
        parse_observable(text)
    assert info.value.argument == "observables"
    assert str(info.value).startswith("observables ")
    assert "\n" not in str(info.value)


def test_qubit_outside_the_shadow_and_repeated_names():
    with pytest.raises(InputError, match=r"^observables 'a': qubit 7 is outside the shadow's qubits \(0 to 3\)$"):
        observables_from(["a=Z7"], 4)
    with pytest.raises(InputError, match="'a' is used twice"):
        observables_from(["a=Z0", "a=Z1"], 4)
    with pytest.raises(InputError, match="complex coefficients"):
        observables_from([("b", PauliExpansion.from_strings(["XY"], 1j))], 2)


def test_toml_file_both_forms(tmp_path):
    path = tmp_path / "obs.toml"
    path.write_text('[[observable]]\nname = "string"\nterms = [{pauli = "ZZZ", on = [0, 2, 3]}]\n\n'
                    '[[observable]]\nname = "exchange"\nexpression = "0.5*X0 X1 + 0.5*Y0 Y1"\n\n'
                    '[[observable]]\nname = "sum"\nterms = [{pauli = "XX", on = [0, 1], coefficient = 0.5},\n'
                    '         {pauli = "YY", on = [0, 1], coefficient = 0.5}]\n')
    string, exchange, total = load_observables(path)
    assert string.expression == "Z0 Z2 Z3"
    assert exchange.terms == total.terms
    bad = tmp_path / "bad.toml"
    bad.write_text('[[observable]]\nname = "x"\nterms = [{pauli = "ZZ", on = [0]}]\n')
    with pytest.raises(InputError, match=r"bad.toml: observable 1 \('x'\), term 1: 'on' must list one qubit"):
        load_observables(bad)
    bad.write_text('[[observable]]\nname = "x"\nexpression = "Z0"\nterms = []\n')
    with pytest.raises(InputError, match="either 'expression'"):
        load_observables(bad)


@pytest.mark.parametrize("kind", ["local", "shallow", "global"])
def test_estimates_match_exact_expectations(kind):
    # exact values <psi|O|psi> from numpy Kronecker products of Pauli matrices; scipy ground state
    n = 6
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    ens = {"local": LocalEnsemble(n), "shallow": ShallowEnsemble(n, 1, chain(n)), "global": GlobalEnsemble(n)}[kind]
    texts = ["zz=Z0 Z1", "exchange=0.5*X2 X3 + 0.5*Y2 Y3", "string=X1 X2 X3 X4", "shifted=1 - Z2 + 0.5*X3",
             "zstring=Z0 Z1 Z2 Z3 Z4 Z5"]
    shadow = make_shadow(psi, ens, 2500 if kind == "global" else 6000, seed=11)  # global sampling is slow
    result = estimate(shadow, model, quantities=("observables",), options={"observables": texts})
    truth = [np.vdot(psi, dense_operator(parse_observable(t), n) @ psi).real for t in texts]
    assert list(result.observable_name.values) == [t.split("=")[0] for t in texts]
    ok, worst = within(result.observable.values, result.observable_err.values, truth, blocks=20)
    assert ok, worst


def test_long_z_string_error_bars_depth_two_against_depth_zero():
    # GHZ state: <Z^(x8)> = 1. The per-snapshot variance of o_P is 1/lambda_P - <P>^2 exactly for these
    # Clifford ensembles (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020)): 3^8 - 1 at depth 0 and
    # 1/lambda - 1 ~ 409 at depth 2 on an open 8-qubit brickwork (docs/design.md section 3.3).
    n, snapshots = 8, 120_000
    psi = ghz(n)
    errors = {}
    for depth in (0, 2):
        ens = LocalEnsemble(n) if depth == 0 else ShallowEnsemble(n, depth, chain(n))
        shadow = make_shadow(psi, ens, snapshots, seed=40 + depth)
        result = estimate(shadow, None, quantities=("observables",), options={"observables": ["z8=" + " ".join(
            f"Z{q}" for q in range(n))]})
        value, err = float(result.observable[0]), float(result.observable_err[0])
        assert abs(value - 1.0) <= 4 * err, (depth, value, err)
        inv_lam = 1 / ens.eigenvalue(np.ones(n, dtype=bool))
        errors[depth] = err, np.sqrt((inv_lam - 1.0) / snapshots)
    assert errors[0][1] / errors[2][1] > 3.5  # exact ratio sqrt(6560 / 409) = 4.0
    # the jackknife error with B = 20 blocks has a relative spread of about 1/sqrt(2 (B - 1)) = 0.16
    # (chi distribution, common practice, no source); allow 4 of those at depth 2
    assert abs(errors[2][0] / errors[2][1] - 1) <= 4 * 0.16, errors
    assert errors[2][0] < errors[0][0], errors


def test_unmeasured_string_is_nan_with_a_warning():
    n = 8
    shadow = make_shadow(ghz(n), LocalEnsemble(n), 60, seed=5)
    all_z = np.all(shadow.settings.basis == 2, axis=1).any()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = estimate(shadow, None, quantities=("observables",),
                          options={"observables": ["z8=" + " ".join(f"Z{q}" for q in range(n)), "z0=Z0"]})
    assert not all_z  # no setting measured Z on every qubit (60 settings, probability 60 / 3^8)
    assert np.isnan(result.observable.values[0]) and np.isnan(result.observable_err.values[0])
    assert np.isfinite(result.observable.values[1])
    assert any("no snapshot measured" in str(w.message) for w in caught)


def test_pauli_expansions_and_dicts_are_accepted():
    ops = observables_from({"xx": PauliExpansion.from_strings(["XXI"], 2.0), "z": "Z2"}, 3)
    assert [name for name, _, _ in ops] == ["xx", "z"]
    assert ops[0][1].strings() == ["XXI"] and ops[0][2] == "2*XXI"
