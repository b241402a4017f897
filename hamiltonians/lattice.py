"""Lattices: sites with positions, nearest and next-nearest bonds, a qubit order.

A lattice is built from a Bravais lattice (primitive vectors) and a basis of
sites in the unit cell. Bonds are found by distance shells: the nearest
bonds join sites at the shortest distance, the next-nearest bonds sites at
the second shortest. Periodic directions wrap; open directions cut.

Site ``q`` is qubit ``q`` (docs/design.md section 2). Sites are numbered cell by
cell, row by row (``y`` outer, ``x`` inner, basis site innermost); with
``order="snake"`` every odd row runs backwards, which keeps neighbours close
in a one-dimensional (MPS) ordering.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
import itertools

import networkx as nx
import numpy as np

SQ3 = np.sqrt(3.0)

#: kind -> (primitive vectors, basis positions); nearest-neighbour distance 1.
UNIT_CELLS: dict[str, tuple[list, list]] = {
    "chain": ([(1.0, 0.0)], [(0.0, 0.0)]),
    "ladder": ([(1.0, 0.0)], [(0.0, 0.0), (0.0, 1.0)]),
    "square": ([(1.0, 0.0), (0.0, 1.0)], [(0.0, 0.0)]),
    "triangular": ([(1.0, 0.0), (0.5, SQ3 / 2)], [(0.0, 0.0)]),
    "honeycomb": ([(SQ3, 0.0), (SQ3 / 2, 1.5)], [(0.0, 0.0), (0.0, 1.0)]),
    "kagome": ([(2.0, 0.0), (1.0, SQ3)], [(0.0, 0.0), (1.0, 0.0), (0.5, SQ3 / 2)]),
}

LATTICE_KINDS = tuple(UNIT_CELLS)
BOUNDARIES = ("open", "periodic")
ORDERS = ("row", "snake")


class LatticeError(ValueError):
    """A lattice that cannot be built as asked."""


@dataclass(frozen=True, eq=False)
class Lattice:
    """Sites, positions and bonds of a lattice.

    Attributes
    ----------
    kind : lattice name (one of ``LATTICE_KINDS``) or ``"graph"``.
    size : cells per direction.
    boundary : ``"open"`` or ``"periodic"`` per direction.
    positions : (n, 2) site positions (unwrapped; nearest distance 1).
    cells : (n, 2) integer cell coordinates of each site.
    sublattice : (n,) basis index of each site within its cell.
    bonds : (m, 2) nearest-neighbour pairs ``i < j``.
    next_bonds : (m2, 2) next-nearest pairs ``i < j``.
    bond_orientation : (m, 2) unit vector of each bond, sign fixed so that
        ``y > 0`` (or ``y == 0`` and ``x > 0``); used by direction-dependent
        couplings such as the Kitaev model.
    vectors : (d, 2) primitive vectors (empty for a user graph).
    """

    kind: str
    size: tuple[int, ...]
    boundary: tuple[str, ...]
    positions: np.ndarray
    cells: np.ndarray
    sublattice: np.ndarray
    bonds: np.ndarray
    next_bonds: np.ndarray
    bond_orientation: np.ndarray
    vectors: np.ndarray

    @property
    def n_sites(self) -> int:
        return len(self.positions)

    @property
    def dimension(self) -> int:
        return len(self.size)

    @property
    def is_one_dimensional(self) -> bool:
        """Chains and ladders: the lattices DMRG and TEBD handle well."""
        return self.kind in ("chain", "ladder")

    def pairs(self, which: str) -> np.ndarray:
        """Bond list by name: ``"sites"`` (one column), ``"bonds"`` or ``"next_bonds"``."""
        if which == "sites":
            return np.arange(self.n_sites)[:, None]
        if which == "bonds":
            return self.bonds
        if which == "next_bonds":
            return self.next_bonds
        raise LatticeError(f"unknown bond set {which!r}; allowed: sites, bonds, next_bonds")

    def coordination(self, which: str = "bonds") -> np.ndarray:
        """Number of bonds of the given set at every site."""
        return np.bincount(self.pairs(which).ravel(), minlength=self.n_sites)

    @cached_property
    def graph(self) -> nx.Graph:
        """The lattice as a networkx graph: node ``pos``, edge ``kind`` ("nn"/"nnn")."""
        g = nx.Graph()
        for q, p in enumerate(self.positions):
            g.add_node(q, pos=(float(p[0]), float(p[1])))
        g.add_edges_from(map(tuple, self.bonds.tolist()), kind="nn")
        g.add_edges_from(map(tuple, self.next_bonds.tolist()), kind="nnn")
        return g

    def describe(self) -> str:
        if self.kind == "graph":
            return f"graph of {self.n_sites} sites"
        dims = " x ".join(str(s) for s in self.size)
        bnd = "/".join(self.boundary)
        return f"{self.kind} {dims} ({bnd})"

    @classmethod
    def from_graph(cls, graph: nx.Graph, pos: str = "pos") -> "Lattice":
        """A lattice from any networkx graph.

        Nodes are numbered in the graph's node order. Positions come from the
        node attribute ``pos`` (a pair), or lie on a line when absent. Edges
        are the nearest bonds; pairs at graph distance two are the
        next-nearest bonds.
        """
        nodes = list(graph.nodes)
        index = {v: q for q, v in enumerate(nodes)}
        n = len(nodes)
        if n == 0:
            raise LatticeError("the graph has no nodes")
        xy = np.zeros((n, 2))
        for q, v in enumerate(nodes):
            p = graph.nodes[v].get(pos)
            xy[q] = (q, 0.0) if p is None else (float(p[0]), float(p[1]))
        bonds = _sorted_pairs([(index[a], index[b]) for a, b in graph.edges if a != b])
        two = set()
        for v, dist in nx.all_pairs_shortest_path_length(graph, cutoff=2):
            for w, d in dist.items():
                if d == 2:
                    two.add((index[v], index[w]))
        next_bonds = _sorted_pairs(list(two))
        return cls(
            kind="graph", size=(n,), boundary=("open",), positions=xy,
            cells=np.zeros((n, 2), dtype=int), sublattice=np.zeros(n, dtype=int),
            bonds=bonds, next_bonds=next_bonds,
            bond_orientation=_orientations(xy, bonds), vectors=np.zeros((0, 2)),
        )


def build_lattice(kind: str, size, boundary="open", order: str = "row") -> Lattice:
    """Build a lattice of ``size`` cells per direction.

    ``boundary`` is one word for all directions or one per direction.
    Periodic directions need at least 3 cells (fewer would double bonds).
    """
    if kind not in UNIT_CELLS:
        raise LatticeError(f"unknown lattice kind {kind!r}; allowed: {', '.join(LATTICE_KINDS)}")
    if order not in ORDERS:
        raise LatticeError(f"unknown site order {order!r}; allowed: {', '.join(ORDERS)}")
    vecs, basis = (np.array(a, dtype=float) for a in UNIT_CELLS[kind])
    d = len(vecs)
    size = (size,) if np.isscalar(size) else tuple(size)
    if len(size) != d:
        raise LatticeError(f"a {kind} lattice takes {d} size value(s), got {len(size)}")
    if any(int(s) != s or s < 1 for s in size):
        raise LatticeError(f"lattice sizes must be positive integers, got {list(size)}")
    size = tuple(int(s) for s in size)
    boundary = (boundary,) * d if isinstance(boundary, str) else tuple(boundary)
    if len(boundary) != d or any(b not in BOUNDARIES for b in boundary):
        raise LatticeError(
            f"boundary must be 'open' or 'periodic' (or a list of {d} of them), got {list(boundary)}")
    for s, b in zip(size, boundary):
        if b == "periodic" and s < 3:
            raise LatticeError(f"a periodic direction needs at least 3 cells, got {s}")

    nb = len(basis)
    lx, ly = size[0], (size[1] if d == 2 else 1)
    # cell coordinates in site order
    cells = []
    for iy in range(ly):
        xs = range(lx - 1, -1, -1) if (order == "snake" and iy % 2) else range(lx)
        cells.extend((ix, iy) for ix in xs)
    cells = np.array(cells, dtype=int)
    cell_index = np.empty((lx, ly), dtype=int)
    cell_index[cells[:, 0], cells[:, 1]] = np.arange(len(cells))

    site_cell = np.repeat(cells, nb, axis=0)
    sublattice = np.tile(np.arange(nb), len(cells))
    vec2 = np.vstack([vecs, np.zeros((2 - d, 2))])
    positions = site_cell @ vec2 + basis[sublattice]

    shells = _distance_shells(vecs, basis)
    pairs = {}
    for shell_no, offsets in enumerate(shells):
        found = []
        for b1, b2, shift in offsets:
            shift2 = np.array(list(shift) + [0] * (2 - d))
            target = cells + shift2
            keep = np.ones(len(cells), dtype=bool)
            for axis in range(d):
                n_ax = size[axis]
                if boundary[axis] == "periodic":
                    target[:, axis] %= n_ax
                else:
                    keep &= (target[:, axis] >= 0) & (target[:, axis] < n_ax)
            src = np.arange(len(cells))[keep] * nb + b1
            dst = cell_index[target[keep, 0], target[keep, 1]] * nb + b2
            found.extend(zip(src.tolist(), dst.tolist()))
        pairs[shell_no] = {(min(a, b), max(a, b)) for a, b in found if a != b}
    pairs[1] -= pairs[0]
    bonds = _sorted_pairs(list(pairs[0]))
    next_bonds = _sorted_pairs(list(pairs[1]))

    # orientation from the shortest image of each bond
    disp = _min_image(positions, bonds, vecs, size, boundary)
    return Lattice(
        kind=kind, size=size, boundary=boundary, positions=positions, cells=site_cell,
        sublattice=sublattice, bonds=bonds, next_bonds=next_bonds,
        bond_orientation=_canonical_direction(disp), vectors=vecs,
    )


def _distance_shells(vecs, basis, reach: int = 2):
    """The two shortest inter-site distances and the offsets realising them.

    Returns two lists of ``(b1, b2, cell shift)``: site ``b2`` of cell
    ``c + shift`` is a neighbour of site ``b1`` of cell ``c``.
    """
    d = len(vecs)
    cands = []
    for shift in itertools.product(range(-reach, reach + 1), repeat=d):
        t = np.array(shift, dtype=float) @ vecs
        for b1, p1 in enumerate(basis):
            for b2, p2 in enumerate(basis):
                dist = np.linalg.norm(p2 + t - p1)
                if dist > 1e-9:
                    cands.append((round(dist, 8), b1, b2, shift))
    dists = sorted({c[0] for c in cands})[:2]
    return [[(b1, b2, s) for r, b1, b2, s in cands if r == dist] for dist in dists]


def _min_image(positions, bonds, vecs, size, boundary):
    """Bond displacement vectors, shortest over periodic images."""
    if len(bonds) == 0:
        return np.zeros((0, 2))
    disp = positions[bonds[:, 1]] - positions[bonds[:, 0]]
    images = [range(-1, 2) if b == "periodic" else range(0, 1) for b in boundary]
    best = disp.copy()
    for shift in itertools.product(*images):
        cand = disp + (np.array(shift) * np.array(size)) @ vecs
        better = np.linalg.norm(cand, axis=1) < np.linalg.norm(best, axis=1) - 1e-9
        best[better] = cand[better]
    return best


def _canonical_direction(disp):
    norm = np.linalg.norm(disp, axis=1, keepdims=True)
    unit = disp / np.where(norm > 0, norm, 1.0)
    flip = (unit[:, 1] < -1e-9) | ((np.abs(unit[:, 1]) <= 1e-9) & (unit[:, 0] < 0))
    unit[flip] *= -1
    return np.round(unit, 12) + 0.0


def _orientations(xy, bonds):
    if len(bonds) == 0:
        return np.zeros((0, 2))
    return _canonical_direction(xy[bonds[:, 1]] - xy[bonds[:, 0]])


def _sorted_pairs(pairs) -> np.ndarray:
    if not pairs:
        return np.zeros((0, 2), dtype=int)
    arr = np.sort(np.array(pairs, dtype=int), axis=1)
    arr = np.unique(arr, axis=0)
    return arr
