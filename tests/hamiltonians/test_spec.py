"""The TOML model spec: validation messages and building."""

import numpy as np
import pytest

from hamiltonians.spec import SpecError, parse_spec

GOOD = """
[lattice]
kind = "chain"
size = [6]
boundary = "periodic"

[model]
kind = "tfim"
J = 1.0
h = 0.5
"""


def test_good_spec_builds():
    model = parse_spec(GOOD, "good.toml").build()
    assert model.n_qubits == 6 and len(model.lattice.bonds) == 6
    assert model.spec.parameters == {"J": 1.0, "h": 0.5}
    assert len(model.hamiltonian.combined()) == 12


def test_custom_terms_and_spin_units():
    text = """
[lattice]
kind = "ladder"
size = [3]
[model]
kind = "custom"
units = "spin"
[[model.term]]
pauli = "ZZ"
on = "bonds"
coefficient = -4.0
[[model.term]]
pauli = "X"
on = "sites"
coefficient = 2.0
"""
    model = parse_spec(text).build()
    ham = model.hamiltonian.combined()
    # spin units: -4 SzSz = -ZZ and 2 Sx = X
    assert np.allclose(sorted(set(np.round(ham.coeffs.real, 12))), [-1.0, 1.0])
    assert len(ham) == len(model.lattice.bonds) + model.n_sites


def test_hubbard_has_two_qubits_per_site():
    model = parse_spec('[lattice]\nkind = "chain"\nsize = [3]\n[model]\nkind = "hubbard"\nU = 2.0\n').build()
    assert model.n_qubits == 6
    assert list(model.qubit_site) == [0, 0, 1, 1, 2, 2]


@pytest.mark.parametrize("text,needle", [
    ('[lattice]\nkind = "chain"\nsize = [4]\ncolour = 1\n[model]\nkind = "tfim"\n',
     "unknown key 'colour' in [lattice]; allowed: kind, size, boundary, order"),
    ('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\nDelta = 1.0\n',
     "unknown key 'Delta' in [model] for kind 'tfim'; allowed: kind, units, term, J, h"),
    ('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\nJ = "strong"\n',
     "model.J must be a finite number, not a string"),
    ('[lattice]\nkind = "square"\nsize = [4]\n[model]\nkind = "tfim"\n',
     "lattice.size must be a list of 2 positive integer(s)"),
    ('[lattice]\nkind = "chain"\nsize = [0]\n[model]\nkind = "tfim"\n', "positive integer"),
    ('[lattice]\nkind = "moebius"\nsize = [4]\n[model]\nkind = "tfim"\n',
     "lattice.kind = 'moebius' is not allowed; allowed: chain, ladder"),
    ('[lattice]\nkind = "chain"\nsize = [4]\nboundary = "twisted"\n[model]\nkind = "tfim"\n',
     "lattice.boundary must be 'open' or 'periodic'"),
    ('[lattice]\nkind = "chain"\nsize = [2]\nboundary = "periodic"\n[model]\nkind = "tfim"\n',
     "at least 3 cells"),
    ('[lattice]\nkind = "chain"\nsize = [4]\n', "the spec needs the key 'model'"),
    ('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "custom"\n', "at least one [[model.term]]"),
    ('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "custom"\n[[model.term]]\npauli = "ZQ"\n'
     'coefficient = 1.0\n', "must be 2 letter(s) from X, Y, Z"),
    ('[lattice]\nkind = "square"\nsize = [3, 3]\n[model]\nkind = "kitaev"\n', "needs a honeycomb lattice"),
    ('[lattice\nkind = "chain"\n', "not valid TOML"),
])
def test_bad_specs_give_one_sentence(text, needle):
    with pytest.raises(SpecError) as info:
        parse_spec(text, "spec.toml").build()
    message = str(info.value)
    assert message.startswith("spec.toml: ")
    assert needle in message
    assert "\n" not in message.strip()
