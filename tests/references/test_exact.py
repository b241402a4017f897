"""Exact references: DMRG, reduced density matrices, time evolution."""

import numpy as np
import pytest
import scipy.linalg as sla

from hamiltonians import build_lattice
from hamiltonians.models import heisenberg, tfim
from hamiltonians.pauli import PauliExpansion
from manybody.references import exact


@pytest.mark.slow  # DMRG of four chains up to 40 sites; test_heisenberg_dmrg_matches_ed_12_sites is the fast sibling
def test_heisenberg_dmrg_approaches_hulthen():
    # Hulthen (1938), from Bethe (1931): energy per bond 1/4 - ln 2 in S = sigma/2 units.
    # Open chains, E(L)/(L-1) = e + a/L + b/L^2 (finite-size extrapolation).
    sizes = np.array([16, 24, 32, 40])
    per_bond = []
    for n in sizes:
        e, _ = exact.ground_state_mps(heisenberg(build_lattice("chain", int(n)), units="spin"),
                                      bond_dims=(16, 32, 64), tol=1e-8, cutoff=1e-9)
        per_bond.append(e / (n - 1))
    design = np.vstack([np.ones(len(sizes)), 1 / sizes, 1 / sizes**2]).T
    e_inf = np.linalg.lstsq(design, np.array(per_bond), rcond=None)[0][0]
    assert abs(e_inf - (0.25 - np.log(2))) < 1e-3


def test_dmrg_matches_exact_diagonalization_and_rdms():
    # scipy eigsh is the reference for 12 sites.
    ham = tfim(build_lattice("chain", 12), J=1.0, h=0.9)
    e_ed, psi = exact.ground_state(ham)
    e_mps, mps = exact.ground_state_mps(ham, bond_dims=(32, 64), tol=1e-11, cutoff=1e-12)
    assert abs(e_ed - e_mps) < 1e-8
    dense_mps = np.asarray(mps.to_dense()).ravel()
    assert abs(abs(np.vdot(dense_mps, psi)) - 1) < 1e-8
    for sites in ([0, 1], [3, 4, 5], [2, 7]):
        rho_ed = exact.reduced_density_matrix(psi, sites)
        rho_mps = exact.mps_reduced_density_matrix(mps, sites)
        assert np.allclose(rho_ed, rho_mps, atol=1e-8)


def test_reduced_density_matrix_facts():
    # Bell pair: each qubit maximally mixed, purity 1/2, S2 = ln 2 (a fact of the trade).
    bell = np.array([1, 0, 0, 1]) / np.sqrt(2)
    rho = exact.reduced_density_matrix(bell, [1])
    assert np.allclose(rho, np.eye(2) / 2)
    assert np.isclose(exact.renyi2(rho), np.log(2))
    # GHZ on 5 qubits: any proper subsystem has purity 1/2
    ghz = np.zeros(32)
    ghz[[0, 31]] = 1 / np.sqrt(2)
    assert np.isclose(exact.purity(exact.reduced_density_matrix(ghz, [0, 2, 4])), 0.5)


def test_pauli_expectations_match_dense():
    rng = np.random.default_rng(3)
    psi = rng.standard_normal(16) + 1j * rng.standard_normal(16)
    psi /= np.linalg.norm(psi)
    strings = ["XYZI", "YYXZ", "IIIZ", "ZXIY"]
    ops = PauliExpansion.from_strings(strings)
    ref = [np.vdot(psi, PauliExpansion.from_strings(s).to_dense() @ psi).real for s in strings]
    assert np.allclose(exact.pauli_expectations(ops, psi), ref)


def test_evolve_matches_scipy_expm():
    # scipy.linalg.expm of the dense Hamiltonian is the reference.
    ham = tfim(build_lattice("chain", 6), J=1.0, h=0.7)
    psi0 = exact.product_state("0" * 6)
    times = [0.0, 0.3, 1.1]
    out = exact.evolve(ham, psi0, times)
    h = ham.to_dense()
    for t, psi in zip(times, out):
        assert np.allclose(psi, sla.expm(-1j * t * h) @ psi0, atol=1e-10)


def test_tebd_matches_dense_evolution():
    import quimb.tensor as qtn

    n = 8
    ham = tfim(build_lattice("chain", n), J=1.0, h=1.2)
    times = [0.5, 1.0]
    dense = exact.evolve(ham, exact.product_state("0" * n), times)
    states, _ = exact.evolve_mps(ham, qtn.MPS_computational_state("0" * n), times)
    zz = PauliExpansion.from_strings("IIIZZIII")
    for psi, mps in zip(dense, states):
        v = np.asarray(mps.to_dense()).ravel()
        assert abs(abs(np.vdot(v, psi)) - 1) < 1e-5
        assert abs(exact.expectation(zz, psi) - exact.expectation(zz, v)) < 1e-5


def test_local_ham_rejects_long_range():
    with pytest.raises(ValueError, match="nearest-neighbour"):
        exact.local_ham_1d(PauliExpansion.from_strings("XIX"))


def test_heisenberg_dmrg_matches_ed_12_sites():
    # scipy eigsh reference; DMRG energy and reduced density matrices to 1e-8.
    ham = heisenberg(build_lattice("chain", 12))
    e_ed, psi = exact.ground_state(ham)
    e_mps, mps = exact.ground_state_mps(ham, bond_dims=(32, 64), tol=1e-12, cutoff=1e-13)
    assert abs(e_ed - e_mps) < 1e-8
    for sites in ([5, 6], [0, 1, 2]):
        assert np.allclose(exact.reduced_density_matrix(psi, sites),
                           exact.mps_reduced_density_matrix(mps, sites), atol=1e-8)


def test_quench_dense_and_tebd_agree_and_entropy_grows():
    # Transverse-field Ising quench from |0...0>, 12 sites, t <= 2: dense evolution
    # (scipy expm_multiply) and TEBD (quimb) agree on <Z_i Z_j>(t) and the half-chain
    # Renyi-2 entropy to 1e-4. Early on S2 grows with t (Calabrese and Cardy,
    # J. Stat. Mech. P04010 (2005): linear growth before saturation).
    import quimb.tensor as qtn

    n = 12
    ham = tfim(build_lattice("chain", n), J=1.0, h=1.0)
    times = [0.25, 0.5, 0.75, 1.0, 1.5, 2.0]
    dense = exact.evolve(ham, exact.product_state("0" * n), times)
    states, _ = exact.evolve_mps(ham, qtn.MPS_computational_state("0" * n), times, bond_dim=128)
    zz = PauliExpansion.from_strings("IIIIZIIZIIII")
    s2 = []
    for psi, mps in zip(dense, states):
        v = np.asarray(mps.to_dense()).ravel()
        assert abs(exact.expectation(zz, psi) - exact.expectation(zz, v)) < 1e-4
        s_dense = exact.renyi2(exact.reduced_density_matrix(psi, range(n // 2)))
        s_mps = -np.log(exact.mps_half_purity(mps, n // 2))
        assert abs(s_dense - s_mps) < 1e-4
        s2.append(s_dense)
    slope = np.polyfit(times[:4], s2[:4], 1)[0]
    assert slope > 0 and np.all(np.diff(s2[:4]) > 0)
