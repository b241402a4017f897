"""Hubbard observables against the two-site closed form and openfermion/scipy exact diagonalization."""

import numpy as np
import openfermion as of
import pytest

from hamiltonians.pauli import PauliExpansion
from hamiltonians.spec import parse_spec
from manybody.estimation.driver import estimate
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from tests.helpers import chain, make_shadow, tfim_model, within

SPEC = '[lattice]\nkind = "{kind}"\nsize = {size}\nboundary = "open"\n[model]\nkind = "hubbard"\nt = {t}\nU = {U}\n'


def hubbard_model(kind, size, t, u):
    return parse_spec(SPEC.format(kind=kind, size=size, t=t, U=u), "hubbard.toml").build()


def half_filled_ground_state(fermion_hamiltonian, n_qubits):
    """Lowest state with n_qubits / 2 electrons: openfermion's number-sector restriction, numpy eigh."""
    full = of.get_sparse_operator(fermion_hamiltonian, n_qubits=n_qubits).toarray()
    index = of.jw_number_indices(n_qubits // 2, n_qubits)
    energies, vectors = np.linalg.eigh(full[np.ix_(index, index)])
    assert energies[1] - energies[0] > 1e-6  # a unique ground state in the sector
    psi = np.zeros(2**n_qubits, dtype=complex)
    psi[index] = vectors[:, 0]
    return energies[0], psi


def exact_values(psi, n_sites, bonds):
    """The same quantities from openfermion operators (its own Jordan-Wigner inside get_sparse_operator)."""
    nq = 2 * n_sites

    def ev(op):
        return np.vdot(psi, of.get_sparse_operator(op, n_qubits=nq) @ psi).real

    n = [[of.FermionOperator(((2 * i + s, 1), (2 * i + s, 0))) for i in range(n_sites)] for s in (0, 1)]
    charge = [n[0][i] + n[1][i] for i in range(n_sites)]
    sz = [0.5 * (n[0][i] - n[1][i]) for i in range(n_sites)]
    hop = [sum((of.FermionOperator(((2 * i + s, 1), (2 * j + s, 0))) + of.FermionOperator(((2 * j + s, 1), (2 * i + s, 0)))
                for s in (0, 1)), of.FermionOperator()) for i, j in bonds]
    return {"density": [[ev(n[s][i]) for i in range(n_sites)] for s in (0, 1)],
            "double_occupancy": [ev(n[0][i] * n[1][i]) for i in range(n_sites)],
            "charge_correlation": [[ev(charge[i] * charge[j]) for j in range(n_sites)] for i in range(n_sites)],
            "spin_correlation": [[ev(sz[i] * sz[j]) for j in range(n_sites)] for i in range(n_sites)],
            "hopping": [ev(h) for h in hop]}


@pytest.mark.parametrize("depth", [0, 1])
def test_dimer_double_occupancy_closed_form(depth):
    # Two-site Hubbard model at half filling: E0 = (U - sqrt(U^2 + 16 t^2))/2 (textbook result); by
    # Hellmann-Feynman, sum_i <n_iu n_id> = dE0/dU = (1 - U/sqrt(U^2 + 16 t^2))/2, the same on both sites.
    t, u = 1.0, 4.0
    model = hubbard_model("chain", "[2]", t, u)
    e0, psi = half_filled_ground_state(of.fermi_hubbard(2, 1, t, u, periodic=False), 4)
    root = np.sqrt(u**2 + 16 * t**2)
    assert abs(e0 - (u - root) / 2) < 1e-10
    ens = LocalEnsemble(4) if depth == 0 else ShallowEnsemble(4, depth, chain(4))
    result = estimate(make_shadow(psi, ens, 20000, seed=60 + depth), model, quantities=("hubbard", "energy"))
    ok, worst = within(result.double_occupancy.values, result.double_occupancy_err.values, (1 - u / root) / 4)
    assert ok, worst
    # Hellmann-Feynman in t: sum over bonds of the hopping = -dE0/dt = 8t/sqrt(U^2 + 16 t^2) (one bond)
    ok, worst = within(result.hopping.values, result.hopping_err.values, 8 * t / root)
    assert ok, worst
    # the pieces add up to the energy snapshot by snapshot: -t hopping + U double occupancy (mu = 0)
    parts = -t * result.hopping.sum() + u * result.double_occupancy.sum()
    assert abs(float(parts - result.energy)) < 1e-9 * (1 + abs(float(result.energy)))


def test_two_by_two_cluster_against_exact_diagonalization():
    t, u = 1.0, 4.0
    model = hubbard_model("square", "[2, 2]", t, u)
    reference = of.fermi_hubbard(2, 2, t, u, periodic=False)  # sites x + 2 y, spin orbital 2i + s
    assert np.allclose(model.hamiltonian.to_dense(), of.get_sparse_operator(reference, n_qubits=8).toarray())
    _, psi = half_filled_ground_state(reference, 8)
    result = estimate(make_shadow(psi, LocalEnsemble(8), 30000, seed=71), model, quantities=("hubbard",))
    bonds = list(zip(result.bond_site_a.values.tolist(), result.bond_site_b.values.tolist()))
    assert sorted(tuple(sorted(b)) for b in bonds) == [(0, 1), (0, 2), (1, 3), (2, 3)]
    truth = exact_values(psi, 4, bonds)
    for name, value in truth.items():
        ok, worst = within(result[name].values, result[name + "_err"].values, value, blocks=20)
        assert ok, (name, worst)
    assert result.density.dims == ("spin", "site") and list(result.spin.values) == ["up", "down"]
    assert result.spin_correlation.dims == ("site_a", "site_b")


def test_not_built_for_spin_models():
    n = 4
    psi = np.zeros(2**n)
    psi[0] = 1.0
    result = estimate(make_shadow(psi, LocalEnsemble(n), 200, seed=1), tfim_model(n), quantities=("hubbard",))
    assert "double_occupancy" not in result


def test_pauli_forms_of_the_densities():
    # Jordan-Wigner: n_a = (1 - Z_a)/2 (Jordan and Wigner, Z. Phys. 47, 631 (1928); from memory)
    from manybody.estimation.accumulators.hubbard import hubbard_operators, linear_forms

    ops = hubbard_operators(2, [(0, 1)])["density"]
    forms = linear_forms([PauliExpansion.from_qubit_operator(of.jordan_wigner(op), 4) for op in ops], 4)
    const, lin, quad, codes, other = forms
    assert np.allclose(const, 0.5) and np.allclose(lin.toarray(), -0.5 * np.eye(4)[[0, 2, 1, 3]])
    assert quad.nnz == 0 and len(codes) == 0
