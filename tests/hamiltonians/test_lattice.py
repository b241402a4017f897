"""Lattices: bond counts and coordination numbers, compared with networkx generators."""

import networkx as nx
import numpy as np
import pytest

from hamiltonians.lattice import Lattice, LatticeError, build_lattice


@pytest.mark.parametrize("kind,size,nn,nnn", [
    # Coordination numbers of the infinite lattices (common practice, no source):
    # nearest / next-nearest neighbours.
    ("chain", [8], 2, 2),
    ("ladder", [6], 3, 2),
    ("square", [4, 4], 4, 4),
    ("triangular", [4, 4], 6, 6),
    ("honeycomb", [3, 3], 3, 6),
    ("kagome", [3, 3], 4, 4),
])
def test_periodic_coordination(kind, size, nn, nnn):
    lat = build_lattice(kind, size, "periodic")
    assert set(lat.coordination("bonds")) == {nn}
    assert set(lat.coordination("next_bonds")) == {nnn}
    assert len(lat.bonds) == lat.n_sites * nn // 2
    # nearest bonds all have unit length (lattice spacing 1, common practice, no source), measured
    # between the nearest periodic images of the two sites
    disp = lat.positions[lat.bonds[:, 1]] - lat.positions[lat.bonds[:, 0]]
    shifts = np.array(np.meshgrid(*[[-1, 0, 1]] * len(size))).reshape(len(size), -1).T
    images = (shifts * np.array(size)) @ lat.vectors
    lengths = np.linalg.norm(disp[:, None, :] + images[None, :, :], axis=2).min(axis=1)
    assert np.allclose(lengths, 1.0)
    # and so do the bond orientations, unit vectors by construction
    assert np.allclose(np.linalg.norm(lat.bond_orientation, axis=1), 1.0)


def test_open_chain_and_ladder_counts():
    # Open chain of L sites: L-1 bonds, L-2 next-nearest (common practice, no source).
    lat = build_lattice("chain", 10)
    assert len(lat.bonds) == 9 and len(lat.next_bonds) == 8
    # Ladder of L rungs: 2(L-1) leg bonds + L rungs; 2(L-1) diagonals.
    lad = build_lattice("ladder", [7])
    assert len(lad.bonds) == 2 * 6 + 7 and len(lad.next_bonds) == 2 * 6


@pytest.mark.parametrize("lx,ly,periodic", [(4, 3, False), (4, 5, True), (3, 3, True)])
def test_square_matches_networkx_grid(lx, ly, periodic):
    # networkx.grid_2d_graph is the reference square lattice.
    lat = build_lattice("square", [lx, ly], "periodic" if periodic else "open")
    ref = nx.grid_2d_graph(lx, ly, periodic=periodic)
    ours = nx.Graph(lat.bonds.tolist())
    assert nx.is_isomorphic(ours, ref)
    # and the position map is the identity on grid coordinates
    mapping = {q: (int(round(p[0])), int(round(p[1]))) for q, p in enumerate(lat.positions)}
    assert all(ref.has_edge(mapping[a], mapping[b]) for a, b in lat.bonds.tolist())


def _local_invariants(g):
    """Degree and triangle count of every node: independent of how a torus is cut."""
    return sorted(g.degree(v) for v in g), sorted(nx.triangles(g).values()), g.number_of_edges()


def test_triangular_and_honeycomb_match_networkx_periodic():
    # networkx.triangular_lattice_graph / hexagonal_lattice_graph (periodic) as references.
    # networkx cuts its tori as rectangles and ours are parallelograms, so the
    # graphs differ globally by a twist; node degrees, triangles per node and
    # edge counts must agree.
    tri = build_lattice("triangular", [6, 4], "periodic")
    ref = nx.triangular_lattice_graph(4, 12, periodic=True)
    assert ref.number_of_nodes() == tri.n_sites == 24
    assert _local_invariants(tri.graph.edge_subgraph(map(tuple, tri.bonds.tolist()))) == _local_invariants(ref)
    hexa = build_lattice("honeycomb", [4, 4], "periodic")
    ref = nx.hexagonal_lattice_graph(4, 4, periodic=True)
    assert ref.number_of_nodes() == hexa.n_sites == 32
    assert _local_invariants(nx.Graph(hexa.bonds.tolist())) == _local_invariants(ref)
    # shortest cycles of the honeycomb are hexagons (girth 6)
    assert nx.girth(nx.Graph(hexa.bonds.tolist())) == nx.girth(ref) == 6


def test_open_square_nnn_count():
    # Diagonals of an open Lx x Ly grid: 2 (Lx-1)(Ly-1) (common practice, no source).
    lat = build_lattice("square", [5, 3])
    assert len(lat.next_bonds) == 2 * 4 * 2


def test_snake_order_keeps_rows_adjacent():
    lat = build_lattice("square", [4, 3], order="snake")
    # consecutive qubits are always nearest neighbours in snake order
    bonds = {tuple(b) for b in lat.bonds.tolist()}
    assert all((q, q + 1) in bonds for q in range(lat.n_sites - 1))
    row = build_lattice("square", [4, 3])
    assert (3, 4) not in {tuple(b) for b in row.bonds.tolist()}


def test_honeycomb_bond_orientations():
    lat = build_lattice("honeycomb", [3, 3], "periodic")
    dirs = np.unique(lat.bond_orientation.round(6), axis=0)
    assert len(dirs) == 3
    # each site has one bond of each orientation (Kitaev honeycomb, common practice, no source)
    for d in dirs:
        sel = lat.bonds[np.all(np.isclose(lat.bond_orientation, d), axis=1)]
        assert set(np.bincount(sel.ravel(), minlength=lat.n_sites)) == {1}


def test_from_graph():
    g = nx.cycle_graph(6)
    lat = Lattice.from_graph(g)
    assert len(lat.bonds) == 6 and len(lat.next_bonds) == 6
    assert set(lat.coordination()) == {2}


@pytest.mark.parametrize("args", [("hexagon", [3]), ("chain", [0]), ("square", [3]),
                                  ("chain", [2], "periodic"), ("chain", [4], "twisted")])
def test_bad_lattices(args):
    with pytest.raises(LatticeError):
        build_lattice(*args)
