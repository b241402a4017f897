"""Matrix-product references: agreement with the dense ones, and published values for long chains."""

import warnings
from collections import namedtuple

import numpy as np
import pytest
import quimb.tensor as qtn

from hamiltonians.spec import parse_spec
from manybody.references import exact, mps, reference
from manybody.references.dataset import reference_dataset

Subsystem = namedtuple("Subsystem", "label sites")
COMPARED = ("energy", "energy_density", "energy_variance", "magnetization", "correlation",
            "connected_correlation", "mutual_information", "purity", "renyi2")


def model_of(lattice: str, model: str):
    return parse_spec(f"[lattice]\n{lattice}\n[model]\n{model}\n").build()


def assert_same(a, b, atol):
    for name in COMPARED:
        if name in b:
            x, y = a[name].values, b[name].values
            assert np.array_equal(np.isnan(x), np.isnan(y)), name
            assert np.allclose(np.nan_to_num(x), np.nan_to_num(y), atol=atol, rtol=0), (name, np.nanmax(abs(x - y)))


def test_mps_dataset_of_random_mps_equals_dense():
    # A random complex MPS and its dense vector (quimb to_dense) must give the same numbers to rounding,
    # including Hubbard strings of weight 4 (Jordan-Wigner) and blocks in the middle of the chain.
    for lattice, model in [('kind = "chain"\nsize = [8]', 'kind = "xxz"\nDelta = 0.6\nh = 0.3'),
                           ('kind = "chain"\nsize = [3]', 'kind = "hubbard"'),
                           ('kind = "ladder"\nsize = [4]', 'kind = "tfim"\nh = 0.7')]:
        m = model_of(lattice, model)
        psi = qtn.MPS_rand_state(m.n_qubits, bond_dim=6, seed=3, dtype=complex)
        subsystems = [Subsystem("0-1", (0, 1)), Subsystem("1-2", (1, 2)), Subsystem("2", (2,))]
        dense = np.asarray(psi.to_dense()).ravel()
        assert_same(mps.mps_dataset(m, psi, subsystems), reference_dataset(m, dense, subsystems), atol=1e-12)


def test_non_contiguous_subsystem_is_nan_with_warning():
    m = model_of('kind = "chain"\nsize = [6]', 'kind = "tfim"')
    psi = qtn.MPS_rand_state(6, bond_dim=4, seed=1)
    with pytest.warns(UserWarning, match="not contiguous"):
        ds = mps.mps_dataset(m, psi, [Subsystem("0,2", (0, 2)), Subsystem("1-3", (1, 2, 3))])
    assert np.isnan(ds.purity.values[0]) and np.isfinite(ds.purity.values[1])


@pytest.mark.parametrize("model", ['kind = "tfim"\nh = 0.9', 'kind = "heisenberg"'])
def test_dmrg_reference_agrees_with_exact_diagonalization(model):
    # scipy eigsh (dense) is the reference; DMRG at this bond dimension is exact for 10 sites to ~1e-9.
    m = model_of('kind = "chain"\nsize = [10]', model)
    subsystems = [Subsystem("0-4", tuple(range(5))), Subsystem("3-6", (3, 4, 5, 6))]
    ed = reference(m, "ground", subsystems=subsystems, method="dense")
    dm = reference(m, "ground", subsystems=subsystems, method="mps", bond_dim=32, cutoff=1e-14)
    assert dm.attrs["method"] == "DMRG" and ed.attrs["method"] == "exact diagonalization"
    assert dm.attrs["bond_dim"] == 32 and dm.attrs["cutoff"] == 1e-14
    if "heisenberg" in model:  # a degenerate-free singlet, but <sigma> = 0 makes signs irrelevant
        assert np.allclose(dm.magnetization, 0, atol=1e-6)
    assert_same(dm, ed, atol=1e-6)


@pytest.mark.parametrize("model,state", [('kind = "tfim"\nh = 1.0', "zero"), ('kind = "heisenberg"', "neel")])
def test_tebd_reference_agrees_with_expm_multiply(model, state):
    # scipy expm_multiply (dense) is the reference. With no truncation (bond dimension 2^5 = 32 is exact for
    # 10 sites) only the fourth-order Trotter error remains, ~ t dt^4 x (nested commutators, ~n) ~ 1e-7
    # for dt = 0.02 (at dt = 0.05 the Heisenberg energy is off by 3e-6).
    m = model_of('kind = "chain"\nsize = [10]', model)
    subsystems = [Subsystem("0-4", tuple(range(5))), Subsystem("2-5", (2, 3, 4, 5))]
    times = [0.0, 0.4, 1.0]
    dense = reference(m, state, times=times, subsystems=subsystems, method="dense")
    tebd = reference(m, state, times=times, subsystems=subsystems, method="mps", bond_dim=32, cutoff=0.0,
                     time_step=0.02)
    assert tebd.attrs["method"] == "TEBD" and dense.attrs["method"] == "expm_multiply"
    assert list(tebd.time.values) == times
    assert tebd.attrs["discarded_weight"] < 1e-10  # no truncation: only rounding, ~1e-16 per gate x 1e4 gates
    assert_same(tebd, dense, atol=1e-6)


def test_tebd_with_swap_gates_on_a_ladder_agrees_with_dense():
    # A 2 x 4 ladder has legs two apart in the qubit order: swap gates (tebd.py) against scipy expm_multiply.
    # The Suzuki fourth-order step: the energy error falls 16-fold per halving of dt (5.6e-5, 3.5e-6, 2.2e-7
    # at dt = 0.1, 0.05, 0.025, t = 0.6), so dt = 0.02 is well inside 1e-6.
    m = model_of('kind = "ladder"\nsize = [4]', 'kind = "tfim"\nh = 0.8')
    times = [0.3, 0.6]
    dense = reference(m, "zero", times=times, subsystems=[Subsystem("0-1", (0, 1))], method="dense")
    tebd = reference(m, "zero", times=times, subsystems=[Subsystem("0-1", (0, 1))], method="mps",
                     bond_dim=16, cutoff=0.0, time_step=0.02)
    assert_same(tebd, dense, atol=1e-6)


def pfeuty_ground_energy(n: int, J: float, h: float) -> float:
    """Open chain H = -J sum Z_i Z_(i+1) - h sum X_i: E0 = -sum_k Lambda_k / 2 over the fermion modes.

    Pfeuty, Ann. Phys. 57, 79 (1970): Lambda_k^2 are the eigenvalues of (A - B)(A + B); for this chain
    (A - B) = 2 M with M the bidiagonal matrix (h on the diagonal, J above it), so Lambda_k = 2 s_k with
    s_k the singular values of M and E0 = -sum_k s_k.
    """
    m = np.diag(np.full(n, h)) + np.diag(np.full(n - 1, J), 1)
    return -float(np.sum(np.linalg.svd(m, compute_uv=False)))


def renyi2_central_charge(renyi2: np.ndarray, n_sites: int) -> float:
    """c from S2(l) = (c/8) ln d(l) + b + f d(l)^(-1/2), d(l) = (2L/pi) sin(pi l / L), for L/8 <= l <= 7L/8.

    Calabrese and Cardy, J. Stat. Mech. P06002 (2004): S_n(l) = (c/12)(1 + 1/n) ln d(l) + const on an open
    chain, c/8 for n = 2. The term d^(-1/2) is the leading correction to scaling of S_n, ~ l^(-1/n) for the
    open Ising chain (Cardy and Calabrese, J. Stat. Mech. P04023 (2010); exponent from memory); fitting it
    removes most of the finite-size drift of c.
    """
    ell = np.arange(1, n_sites)
    d = (2 * n_sites / np.pi) * np.sin(np.pi * ell / n_sites)
    keep = (ell >= n_sites // 8) & (ell <= n_sites - n_sites // 8)
    design = np.vstack([np.log(d) / 8, np.ones_like(d), d**-0.5]).T[keep]
    return float(np.linalg.lstsq(design, renyi2[keep], rcond=None)[0][0])


def critical_tfim_profile(n: int):
    m = model_of(f'kind = "chain"\nsize = [{n}]', 'kind = "tfim"\nJ = 1.0\nh = 1.0')
    subsystems = [Subsystem(f"0-{k - 1}", tuple(range(k))) for k in range(1, n)]
    return reference(m, "ground", subsystems=subsystems, method="mps", bond_dim=48, cutoff=1e-12)


def test_pfeuty_energy_and_central_charge_24_sites():
    ds = critical_tfim_profile(24)
    # DMRG on 24 sites at bond dimension 48 is converged far below 1e-7 (energy variance checks it).
    assert abs(float(ds.energy) - pfeuty_ground_energy(24, 1.0, 1.0)) < 1e-7
    assert float(ds.energy_variance) < 1e-6
    # The corrections beyond d^(-1/2) shrink with L: fitted c - 1/2 = 0.072, 0.051, 0.022 at L = 24, 32, 64
    # in our runs. 0.1 is a loose bound that still catches a wrong entropy (a factor 2 in c, S1 for S2).
    assert abs(renyi2_central_charge(ds.renyi2.values, 24) - 0.5) < 0.1


@pytest.mark.slow
def test_pfeuty_energy_and_central_charge_64_sites():
    # The brief's long chain: 64 sites at the critical point h = J, DMRG against the free-fermion energy.
    ds = critical_tfim_profile(64)
    assert abs(float(ds.energy) - pfeuty_ground_energy(64, 1.0, 1.0)) < 1e-6
    c64 = renyi2_central_charge(ds.renyi2.values, 64)
    c32 = renyi2_central_charge(critical_tfim_profile(32).renyi2.values, 32)
    # Tolerance: the unfitted corrections shift c by 0.051 at L = 32 and 0.022 at L = 64 in our runs
    # (they shrink as L grows); 0.05 at L = 64 is twice the size-dependence seen, and c must move
    # towards 1/2 as L doubles.
    assert abs(c64 - 0.5) < 0.05
    assert abs(c64 - 0.5) < abs(c32 - 0.5)


def test_block_purity_too_large_is_nan_with_warning(monkeypatch):
    # Blocks inside the chain need the block tensor; beyond the size limit the purity is NaN, not a crash.
    psi = qtn.MPS_rand_state(10, bond_dim=8, seed=2)
    tensors = mps.site_tensors(psi)
    envs = mps.left_environments(tensors)
    exact_value = exact.subsystem_purity(np.asarray(psi.to_dense()).ravel(), range(3, 7))
    assert np.isclose(mps.block_purity(tensors, envs, 3, 6), exact_value, atol=1e-12)
    monkeypatch.setattr(mps, "MAX_BLOCK_ELEMENTS", 16)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert np.isnan(mps.block_purity(tensors, envs, 3, 6))
    assert any("too large" in str(w.message) for w in caught)
