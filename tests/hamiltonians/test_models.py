"""Models against outside references: free fermions, textbook Hubbard dimer, openfermion, quimb."""

import numpy as np
import pytest
import quimb as qu

from hamiltonians import build_lattice, particle_number
from hamiltonians.models import heisenberg, hubbard, j1j2, kitaev, tfim, xxz, xy
from manybody.references.exact import ground_state


def pfeuty_ground_energy(n, J, h):
    """Periodic chain H = -J sum Z Z - h sum X, even fermion parity sector.

    Pfeuty, Ann. Phys. 57, 79 (1970): E0 = -sum_k sqrt(J^2 + h^2 - 2 J h cos k),
    k = (2m+1) pi / n, m = 0..n-1 (antiperiodic fermions).
    """
    k = (2 * np.arange(n) + 1) * np.pi / n
    return -np.sum(np.sqrt(J**2 + h**2 - 2 * J * h * np.cos(k)))


@pytest.mark.parametrize("n", [6, 8, 10, 12])
@pytest.mark.parametrize("h", [0.3, 1.0, 2.5])
def test_tfim_periodic_matches_pfeuty(n, h):
    ham = tfim(build_lattice("chain", n, "periodic"), J=1.0, h=h)
    energy, _ = ground_state(ham)
    assert abs(energy - pfeuty_ground_energy(n, 1.0, h)) < 1e-9


@pytest.mark.parametrize("U", [0.0, 1.0, 4.0, 10.0])
def test_hubbard_dimer_half_filling(U):
    # Two-site Hubbard model at half filling (textbook): E0 = (U - sqrt(U^2 + 16 t^2)) / 2.
    t = 1.0
    ham = hubbard(build_lattice("chain", 2), t=t, U=U)
    mat = ham.to_dense()
    number = np.real(np.diag(particle_number(2).to_dense()))
    sector = np.isclose(number, 2)
    e0 = np.linalg.eigvalsh(mat[np.ix_(sector, sector)])[0]
    assert abs(e0 - (U - np.sqrt(U**2 + 16 * t**2)) / 2) < 1e-10


@pytest.mark.parametrize("kind,size,boundary,dims", [
    ("chain", [4], "open", (4, 1)),
    ("chain", [5], "periodic", (5, 1)),
    ("square", [3, 2], "open", (3, 2)),
    ("square", [3, 3], "periodic", (3, 3)),
])
def test_hubbard_equals_openfermion(kind, size, boundary, dims):
    # openfermion's fermi_hubbard mapped by jordan_wigner is the reference.
    from openfermion import fermi_hubbard, jordan_wigner

    t, U, mu = 0.7, 3.0, 0.4
    ours = hubbard(build_lattice(kind, size, boundary), t=t, U=U, mu=mu).to_qubit_operator()
    ref = jordan_wigner(fermi_hubbard(dims[0], dims[1], tunneling=t, coulomb=U, chemical_potential=mu,
                                      periodic=boundary == "periodic"))
    assert ours == ref


@pytest.mark.parametrize("n,cyclic", [(6, False), (7, True)])
def test_spin_chains_equal_quimb(n, cyclic):
    # quimb's ham_* builders use S = sigma/2 (checked: ham_heis(2) has singlet energy -3/4).
    lat = build_lattice("chain", n, "periodic" if cyclic else "open")
    dense = lambda p: p.to_sparse().toarray()  # noqa: E731
    assert np.allclose(dense(heisenberg(lat, J=1.3, units="spin")),
                       qu.ham_heis(n, j=1.3, cyclic=cyclic, sparse=False))
    # sigma units: -J ZZ - h X = -4J SzSz - 2h Sx; quimb's ham_ising is an alias of
    # ham_heis, whose field enters with a minus sign (H = ... - b sum S), so bx = +2h.
    assert np.allclose(dense(tfim(lat, J=0.8, h=0.6)),
                       qu.ham_ising(n, jz=-4 * 0.8, bx=2 * 0.6, cyclic=cyclic, sparse=False))
    assert np.allclose(dense(j1j2(lat, J1=1.0, J2=0.45, units="spin")),
                       qu.ham_j1j2(n, j1=1.0, j2=0.45, cyclic=cyclic, sparse=False))
    assert np.allclose(dense(xxz(lat, J=1.0, Delta=0.4, units="spin")),
                       qu.ham_XXZ(n, delta=0.4, jxy=1.0, cyclic=cyclic, sparse=False))
    # J[(1+g)/2 XX + (1-g)/2 YY] at g = 0 is (J/2)(XX+YY) = 2J (SxSx + SySy)
    assert np.allclose(dense(xy(lat, J=0.9)), qu.ham_XY(n, jxy=2 * 0.9, bz=0.0, cyclic=cyclic, sparse=False))


def test_square_heisenberg_equals_quimb_2d():
    # quimb.ham_heis_2D(n, m) numbers site (i, j) as i*m + j: our row-major order with Lx = m.
    lat = build_lattice("square", [3, 2])
    ours = heisenberg(lat, J=1.0, units="spin").to_sparse().toarray()
    ref = qu.ham_heis_2D(2, 3, j=1.0)
    assert np.allclose(ours, ref.toarray() if hasattr(ref, "toarray") else ref)


def test_kitaev_plaquettes_commute():
    # Kitaev, Ann. Phys. 321, 2 (2006): around every hexagon the product of the
    # Pauli that labels the outward bond at each site, W_p, commutes with H.
    lat = build_lattice("honeycomb", [4, 4], "periodic")  # 3x3 would add winding 6-cycles
    ham = kitaev(lat, Kx=1.0, Ky=0.7, Kz=1.3)
    import networkx as nx

    from hamiltonians.models import kitaev_bond_letters
    from hamiltonians.pauli import PauliExpansion

    letters = kitaev_bond_letters(lat)
    label = {frozenset(b): a for b, a in zip(lat.bonds.tolist(), letters)}
    g = nx.Graph(lat.bonds.tolist())
    hexagons = [c for c in nx.simple_cycles(g, length_bound=6) if len(c) == 6]
    assert len(hexagons) == lat.n_sites // 2  # one plaquette per two sites
    for cyc in hexagons[:4]:
        string = ["I"] * lat.n_sites
        for k, v in enumerate(cyc):
            inside = {frozenset((v, cyc[k - 1])), frozenset((v, cyc[(k + 1) % 6]))}
            outer = [label[frozenset(b)] for b in lat.bonds.tolist() if v in b and frozenset(b) not in inside]
            string[v] = outer[0]
        w = PauliExpansion.from_strings("".join(string))
        comm = (ham * w - w * ham).combined(atol=1e-12)
        assert len(comm) == 0
