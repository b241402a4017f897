"""Hubbard ground states in a particle sector ([model] particles = [up, down])."""

import numpy as np
import openfermion as of
import pytest

import manybody as mb
from manybody.references import exact

HUBBARD = '[lattice]\nkind = "{kind}"\nsize = {size}\n[model]\nkind = "hubbard"\nt = 1.0\nU = {U}\n{extra}'


@pytest.mark.parametrize("U", [2.0, 4.0, 8.0])
def test_dimer_at_half_filling_has_the_closed_form_energy(U):
    # Two-site Hubbard model at half filling: E0 = (U - sqrt(U^2 + 16 t^2)) / 2 (textbook).
    model = mb.parse_model(HUBBARD.format(kind="chain", size="[2]", U=U, extra="particles = [1, 1]\n"))
    energy, psi = exact.ground_state(model.hamiltonian, model.sector)
    assert energy == pytest.approx((U - np.sqrt(U**2 + 16)) / 2, abs=1e-10)
    # the state lies in the sector: one particle of each spin (number operators from openfermion, Jordan-Wigner)
    n_up = of.get_sparse_operator(of.jordan_wigner(of.FermionOperator("0^ 0") + of.FermionOperator("2^ 2")), 4)
    assert np.vdot(psi, n_up @ psi).real == pytest.approx(1.0, abs=1e-10)


def test_square_cluster_sector_energy_matches_openfermion_at_fixed_particle_number():
    # openfermion's ground state at a fixed total particle number is the reference; at half filling of a
    # 2 x 2 cluster it is the lowest over the sectors (up, down) with up + down = 4.
    text = HUBBARD.format(kind="square", size="[2, 2]", U=4.0, extra="")
    model = mb.parse_model(text)
    sparse = model.hamiltonian.to_sparse()
    reference, _ = of.linalg.jw_get_ground_state_at_particle_number(sparse, 4)
    ours = min(exact.ground_state(model.hamiltonian, (up, 4 - up))[0] for up in range(5))
    assert ours == pytest.approx(reference, abs=1e-8)
    sector = mb.parse_model(text + "particles = [2, 2]\n")
    assert exact.ground_state(sector.hamiltonian, sector.sector)[0] == pytest.approx(reference, abs=1e-8)


def test_reference_and_simulation_use_the_sector_and_bad_sectors_are_refused():
    text = HUBBARD.format(kind="chain", size="[3]", U=4.0, extra="particles = [2, 1]\n")
    model = mb.parse_model(text)
    ref = mb.reference(model, "ground")
    energy, _ = exact.ground_state(model.hamiltonian, (2, 1))
    assert float(ref.energy) == pytest.approx(energy, abs=1e-9)
    shadow = mb.simulate(model, "ground", snapshots=100, seed=1)
    assert shadow.metadata["particles"] == [2, 1]
    with pytest.raises(mb.InputError, match="particles must be"):
        mb.parse_model(HUBBARD.format(kind="chain", size="[3]", U=4.0, extra="particles = [4, 1]\n"))
    with pytest.raises(mb.InputError, match="unknown key 'particles'"):
        mb.parse_model('[lattice]\nkind = "chain"\nsize = [3]\n[model]\nkind = "tfim"\nparticles = [1, 1]\n')
