"""<H^2> from near pairs of terms: the same per-snapshot values as the expanded H^2, and the exact variance."""

import numpy as np
import pytest

from manybody.estimation.accumulators.energy import term_values
from manybody.estimation.driver import estimate
from manybody.estimation.energy_variance import square_terms, square_values
from manybody.estimation.setup import Chunk, Eigenvalues, Setup
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import pauli_string_codes
from manybody.references import exact
from manybody.schema import term_table
from tests.helpers import chain, make_shadow, tfim_model, within

N = 7


@pytest.mark.parametrize("make", [lambda: LocalEnsemble(N), lambda: ShallowEnsemble(N, 2, chain(N)),
                                  lambda: GlobalEnsemble(N)], ids=["local", "shallow2", "global"])
def test_near_pairs_give_the_expanded_square_snapshot_by_snapshot(make):
    # Reference: H*H expanded and combined as a Pauli sum (hamiltonians.pauli algebra), each of its
    # strings estimated directly; the near-pair form must give the same number for every snapshot.
    ens = make()
    model = tfim_model(N)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, ens, 300, seed=2)
    lam = Eigenvalues(ens)
    setup = Setup(shadow=shadow, model=model, lam=lam, qubit_site=np.arange(N), setting_block=np.zeros(300, int),
                  n_blocks=1, multi=False, setting_shots=np.ones(300))
    pos, bits = shadow.snapshots()
    chunk = Chunk(setup, pos, bits)
    codes, coeffs, _ = term_table(model.hamiltonian, np.arange(N), N)
    lam_terms = np.array([lam.of(c) for c in codes])
    values = term_values(codes, lam_terms, chunk)
    square = square_terms(codes, coeffs, ens, lam.of)
    ours = square_values(values, values @ coeffs, square, lambda c, lm: term_values(c, lm, chunk))
    h2 = (model.hamiltonian * model.hamiltonian).combined(atol=1e-12)
    c2 = pauli_string_codes(h2.x_bits, h2.z_bits)
    direct = term_values(c2, np.array([lam.of(c) for c in c2]), chunk) @ h2.real_if_close().real
    assert np.allclose(ours, direct, rtol=1e-9, atol=1e-9)


def test_energy_variance_of_a_quenched_state_against_exact():
    # <H^2> - <H>^2 of exp(-iHt)|0...0> from scipy expm_multiply (exact evolution).
    model = tfim_model(N)
    psi = exact.evolve(model.hamiltonian, exact.product_state("0" * N), [0.7])[0]
    h = model.hamiltonian.to_sparse()
    e = np.vdot(psi, h @ psi).real
    variance = np.vdot(h @ psi, h @ psi).real - e**2
    result = estimate(make_shadow(psi, LocalEnsemble(N), 20000, seed=6), model, quantities=("energy",))
    ok, worst = within(result.energy_variance.values, result.energy_variance_err.values, variance)
    assert ok, worst
