"""Measurement ensembles and their settings (docs/design.md section 3).

A setting is one draw of the random unitary: for the local ensemble a basis
per qubit (codes 0 = X, 1 = Y, 2 = Z); for the shallow ensemble a Clifford
index (canonical two-qubit table, :mod:`manybody.clifford`) per gate slot
plus a basis per qubit; for the global ensemble an n-qubit Clifford tableau.
Settings are stored explicitly, never only as a seed.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from functools import cached_property

import networkx as nx
import numpy as np

from manybody.measure.clifford import clifford_table
from manybody.measure.eigenvalues import contract_support_chain, global_eigenvalue, local_eigenvalue, support_chain_key
from manybody.measure.paulis import BASIS_LETTERS, BASIS_PAULI
from manybody.measure.propagation import propagate_layers, propagate_tableau, snapshot_values_many

N_TWO_QUBIT_CLIFFORDS = 11520
#: the global ensemble tableau grows as 4 n^2 bits per setting; simulation as 2^n.
MAX_GLOBAL_QUBITS = 16


@dataclass(frozen=True, eq=False)
class Settings:
    """Drawn settings: ``ids`` (K,) and the arrays of the ensemble kind.

    basis : (K, n) uint8 basis codes (local and shallow).
    gates : (K, G) uint16 two-qubit Clifford indices (shallow).
    tableau_x, tableau_z : (K, 2n, n) uint8 images of X_0, Z_0, X_1, Z_1, ...;
    tableau_sign : (K, 2n) int8 (global).
    """

    ids: np.ndarray
    basis: np.ndarray | None = None
    gates: np.ndarray | None = None
    tableau_x: np.ndarray | None = None
    tableau_z: np.ndarray | None = None
    tableau_sign: np.ndarray | None = None

    def __len__(self) -> int:
        return len(self.ids)

    def take(self, index) -> "Settings":
        """The settings at the given positions."""
        pick = lambda a: None if a is None else a[index]  # noqa: E731
        return Settings(self.ids[index], pick(self.basis), pick(self.gates), pick(self.tableau_x),
                        pick(self.tableau_z), pick(self.tableau_sign))


def basis_strings(basis: np.ndarray) -> list[str]:
    table = np.frombuffer(BASIS_LETTERS.encode(), dtype=np.uint8)
    return [row.tobytes().decode() for row in table[basis]]


class Ensemble(ABC):
    """What every measurement ensemble provides (docs/design.md section 3).

    ``kind`` ("local", "shallow", "global"), ``n_qubits`` and ``depth`` name it;
    ``is_local`` says whether a setting is only a random X/Y/Z basis per qubit
    (the local ensemble, and the shallow ensemble at depth 0), which is what
    the fast product-form estimators need. The channel is diagonal in the
    Pauli basis with eigenvalue :meth:`eigenvalue` of a support; a snapshot's
    value <b|U P U^dag|b> comes from :meth:`setting_factors`, computed once per
    setting and then applied to every shot of it.
    """

    kind: str
    n_qubits: int
    depth: int

    @property
    def is_local(self) -> bool:
        return False

    @abstractmethod
    def draw(self, n_settings: int, rng) -> Settings:
        """``n_settings`` independent settings drawn with ``rng`` (a Generator or a seed)."""

    @abstractmethod
    def eigenvalue(self, support) -> float:
        """lambda_P of a Pauli with this support (a boolean mask or a list of qubits)."""

    @abstractmethod
    def final_paulis(self, codes: np.ndarray, settings: Settings):
        """U P U^dag = sign * Q per setting, before the local basis: Q as codes (K, n) and sign (K,)."""

    @abstractmethod
    def gates(self, settings: Settings, k: int) -> list[tuple[str, tuple[int, ...]]]:
        """Standard gates (h, s, sdg, x, y, z, cx) of setting position ``k`` in time order, basis rotations included."""

    @abstractmethod
    def describe(self) -> str:
        """One line for people: what a setting is."""

    def setting_factors(self, codes, settings: Settings):
        """Per setting, the qubits whose outcome bits enter the value of P and its sign.

        Returns (mask (K, n) bool, sign (K,) in {-1, 0, +1}); sign 0 means that
        U P U^dag is not Z-type after the basis rotation, so P is invisible.
        """
        final, sign = self.final_paulis(np.asarray(codes, dtype=np.uint8), settings)
        support = final != 0
        matched = ~support | (final == BASIS_PAULI[settings.basis])
        return support, np.where(matched.all(axis=1), sign, 0).astype(np.int8)

    def snapshot_values(self, codes, settings: Settings, setting_index, outcomes) -> np.ndarray:
        """<b|U P U^dag|b> for every snapshot: (N,) int8 in {-1, 0, +1}.

        ``setting_index`` (N,) positions in ``settings``; ``outcomes`` (N, n) bits.
        """
        mask, sign = self.setting_factors(codes, settings)
        parity = np.bitwise_xor.reduce(outcomes & mask[setting_index], axis=1)
        return (sign[setting_index] * (1 - 2 * parity.astype(np.int8))).astype(np.int8)

    def snapshot_values_many(self, codes, settings: Settings, setting_index, outcomes) -> np.ndarray:
        """<b|U P U^dag|b> of many strings (S, n) for every snapshot: (N, S) int8."""
        codes = np.atleast_2d(codes)
        out = np.empty((len(setting_index), len(codes)), dtype=np.int8)
        for s, row in enumerate(codes):
            out[:, s] = self.snapshot_values(row, settings, setting_index, outcomes)
        return out

    def same_as(self, other) -> bool:
        """Whether ``other`` draws from the same ensemble (kind, qubits, depth, gate layout)."""
        return (self.kind, self.n_qubits, self.depth) == (other.kind, other.n_qubits, other.depth)


def _basis_gates(settings: Settings, k: int) -> list[tuple[str, tuple[int, ...]]]:
    """Rotations that turn a Z measurement into the X (H) or Y (S^dag, then H) measurement of each qubit."""
    ops = []
    for q, b in enumerate(settings.basis[k].tolist()):
        if b == 0:
            ops.append(("h", (q,)))
        elif b == 1:
            ops += [("sdg", (q,)), ("h", (q,))]
    return ops


@dataclass(frozen=True)
class LocalEnsemble(Ensemble):
    """Every qubit measured in an independent uniformly random basis X, Y or Z."""

    n_qubits: int
    kind: str = field(default="local", init=False)
    depth: int = field(default=0, init=False)

    @property
    def is_local(self) -> bool:
        return True

    def draw(self, n_settings: int, rng) -> Settings:
        rng = np.random.default_rng(rng)
        basis = rng.integers(0, 3, size=(n_settings, self.n_qubits), dtype=np.uint8)
        return Settings(np.arange(n_settings, dtype=np.int64), basis=basis)

    def eigenvalue(self, support) -> float:
        return float(local_eigenvalue(np.count_nonzero(support)))

    def final_paulis(self, codes, settings):
        return np.broadcast_to(codes, (len(settings), len(codes))), np.ones(len(settings), dtype=np.int8)

    def snapshot_values_many(self, codes, settings, setting_index, outcomes):
        return snapshot_values_many(np.atleast_2d(codes), settings.basis, None, None, setting_index, outcomes)

    def gates(self, settings, k):
        return _basis_gates(settings, k)

    def describe(self) -> str:
        return f"local random X/Y/Z bases on {self.n_qubits} qubits"


@dataclass(frozen=True, eq=False)
class ShallowEnsemble(Ensemble):
    """``depth`` layers of random two-qubit Cliffords on disjoint edges, then random local bases.

    ``coupling`` is the (m, 2) edge list of the coupling graph; the layers
    cycle through its edge colour classes (:func:`edge_layers`).
    """

    n_qubits: int
    depth: int
    coupling: np.ndarray
    kind: str = field(default="shallow", init=False)

    def __post_init__(self):
        if self.depth < 0:
            raise ValueError("depth must be >= 0")
        object.__setattr__(self, "coupling", np.asarray(self.coupling, dtype=np.int64).reshape(-1, 2))
        object.__setattr__(self, "_cache", {})

    @property
    def is_local(self) -> bool:
        return len(self.gate_qubits) == 0

    @cached_property
    def layers(self) -> tuple[np.ndarray, ...]:
        classes = edge_layers(self.n_qubits, self.coupling)
        if self.depth and not classes:
            raise ValueError("a shallow ensemble of depth > 0 needs at least one coupling edge")
        return tuple(classes[d % len(classes)] for d in range(self.depth))

    @cached_property
    def gate_qubits(self) -> np.ndarray:
        """(G, 2) qubits of every gate slot, layer by layer."""
        return np.concatenate(self.layers) if self.layers else np.zeros((0, 2), dtype=np.int64)

    @cached_property
    def gate_layer(self) -> np.ndarray:
        return np.repeat(np.arange(self.depth), [len(layer) for layer in self.layers]).astype(np.int64)

    def draw(self, n_settings: int, rng) -> Settings:
        rng = np.random.default_rng(rng)
        gates = rng.integers(0, N_TWO_QUBIT_CLIFFORDS, size=(n_settings, len(self.gate_qubits)),
                             dtype=np.uint16)
        basis = rng.integers(0, 3, size=(n_settings, self.n_qubits), dtype=np.uint8)
        return Settings(np.arange(n_settings, dtype=np.int64), basis=basis, gates=gates)

    def eigenvalue(self, support) -> float:
        """lambda_P of a Pauli with this support (mask or qubit list), cached by light-cone shape."""
        support = np.asarray(support)
        qubits = np.flatnonzero(support) if support.dtype == bool else support
        key = support_chain_key(qubits, self.layers)
        cache = self._cache
        if key not in cache:
            cache[key] = contract_support_chain(*key)
        return cache[key]

    def final_paulis(self, codes, settings):
        if settings.gates is not None and settings.gates.shape[1]:
            return propagate_layers(codes, settings.gates, self.gate_qubits)
        return LocalEnsemble.final_paulis(self, codes, settings)

    def snapshot_values_many(self, codes, settings, setting_index, outcomes):
        return snapshot_values_many(np.atleast_2d(codes), settings.basis, settings.gates, self.gate_qubits,
                                    setting_index, outcomes)

    def gates(self, settings, k):
        words = clifford_table(2).words
        ops = []
        for slot, (a, b) in enumerate(self.gate_qubits.tolist()):
            ops += [(name, tuple((a, b)[q] for q in qs)) for name, qs in words[settings.gates[k, slot]]]
        return ops + _basis_gates(settings, k)

    def same_as(self, other) -> bool:
        return super().same_as(other) and np.array_equal(self.gate_qubits, other.gate_qubits)

    def describe(self) -> str:
        return (f"shallow depth-{self.depth} random two-qubit Clifford circuits on {len(self.coupling)} "
                f"coupling edges of {self.n_qubits} qubits, then random X/Y/Z bases")


@dataclass(frozen=True)
class GlobalEnsemble(Ensemble):
    """One uniformly random n-qubit Clifford per setting, then a Z-basis measurement."""

    n_qubits: int
    kind: str = field(default="global", init=False)
    depth: int = field(default=0, init=False)

    def draw(self, n_settings: int, rng) -> Settings:
        if self.n_qubits > MAX_GLOBAL_QUBITS:
            raise ValueError(f"the global ensemble takes at most {MAX_GLOBAL_QUBITS} qubits")
        rng = np.random.default_rng(rng)
        tx, tz, sign = random_clifford_tableaux(self.n_qubits, n_settings, rng)
        return Settings(np.arange(n_settings, dtype=np.int64), tableau_x=tx, tableau_z=tz, tableau_sign=sign)

    def eigenvalue(self, support) -> float:
        return float(global_eigenvalue(self.n_qubits, np.count_nonzero(support)))

    def final_paulis(self, codes, settings):
        raise NotImplementedError("global Cliffords are measured in Z only: see setting_factors")

    def setting_factors(self, codes, settings: Settings):
        rx, rz, sign = propagate_tableau(np.asarray(codes, dtype=np.uint8), settings.tableau_x, settings.tableau_z,
                                         settings.tableau_sign)
        visible = ~rx.any(axis=1)
        return rz.astype(bool), np.where(visible, sign, 0).astype(np.int8)

    def gates(self, settings, k):
        from manybody.measure.qasm import tableau_gates

        return tableau_gates(settings.tableau_x[k], settings.tableau_z[k], settings.tableau_sign[k])

    def describe(self) -> str:
        return f"global random Cliffords on {self.n_qubits} qubits"


#: the ensembles by name (the ``ensemble`` attribute of settings and shadow files)
ENSEMBLES = {"local": LocalEnsemble, "shallow": ShallowEnsemble, "global": GlobalEnsemble}
ENSEMBLE_KINDS = tuple(ENSEMBLES)


def make_ensemble(kind: str, n_qubits: int, depth: int = 0, coupling=None) -> Ensemble:
    """An ensemble by name; ``shallow`` with depth 0 is the local ensemble in all but name."""
    if kind not in ENSEMBLES:
        raise ValueError(f"unknown ensemble {kind!r}; allowed: {', '.join(ENSEMBLE_KINDS)}")
    if kind == "shallow":
        return ShallowEnsemble(n_qubits, depth, np.zeros((0, 2)) if coupling is None else coupling)
    return ENSEMBLES[kind](n_qubits)


def edge_layers(n_qubits: int, edges) -> list[np.ndarray]:
    """Disjoint edge classes of a coupling graph.

    A chain in qubit order gives brickwork: even bonds (0-1, 2-3, ...) then
    odd bonds. Any other graph is edge-coloured greedily (networkx colouring
    of its line graph, largest degree first), which is deterministic.
    """
    edges = np.sort(np.asarray(edges, dtype=np.int64).reshape(-1, 2), axis=1)
    if len(edges) == 0:
        return []
    if np.all(edges[:, 1] == edges[:, 0] + 1):
        parity = edges[:, 0] % 2
        return [edges[parity == p] for p in (0, 1) if np.any(parity == p)]
    graph = nx.Graph()
    graph.add_nodes_from(range(n_qubits))
    graph.add_edges_from(map(tuple, edges.tolist()))
    colour = nx.coloring.greedy_color(nx.line_graph(graph), strategy="largest_first")
    n_colours = max(colour.values()) + 1
    classes = [[] for _ in range(n_colours)]
    for a, b in edges.tolist():
        classes[colour[(a, b)] if (a, b) in colour else colour[(b, a)]].append((a, b))
    return [np.array(sorted(c), dtype=np.int64) for c in classes]


def _symplectic_form(u: np.ndarray, v: np.ndarray, n: int) -> np.ndarray:
    """<u, v> = x_u . z_v + z_u . x_v (mod 2), rows of (x | z) bits."""
    return ((u[..., :n] & v[..., n:]).sum(-1) + (u[..., n:] & v[..., :n]).sum(-1)) % 2


def random_clifford_tableaux(n: int, count: int, rng):
    """Uniformly random n-qubit Clifford tableaux (symplectic matrix and signs).

    Symplectic Gram-Schmidt: the image v_k of X_k is a uniform nonzero vector
    of the symplectic complement of the pairs already chosen, the image w_k
    of Z_k a uniform vector of that complement with <v_k, w_k> = 1; every
    valid choice is equally likely, so the symplectic matrix is uniform.
    Signs are uniform. Returns tableau_x, tableau_z (count, 2n, n) and
    signs (count, 2n).
    """
    vs, ws = [], []

    def project(vec):
        for v_j, w_j in zip(vs, ws):
            a = _symplectic_form(vec, w_j, n)[:, None]
            b = _symplectic_form(vec, v_j, n)[:, None]
            vec = vec ^ (a * v_j) ^ (b * w_j)
        return vec

    for _ in range(n):
        v = np.zeros((count, 2 * n), dtype=np.uint8)
        todo = np.ones(count, dtype=bool)
        while todo.any():
            cand = project(rng.integers(0, 2, size=(count, 2 * n), dtype=np.uint8))
            ok = todo & cand.any(axis=1)
            v[ok] = cand[ok]
            todo &= ~ok
        w = np.zeros_like(v)
        todo = np.ones(count, dtype=bool)
        while todo.any():
            cand = project(rng.integers(0, 2, size=(count, 2 * n), dtype=np.uint8))
            ok = todo & (_symplectic_form(v, cand, n) == 1)
            w[ok] = cand[ok]
            todo &= ~ok
        vs.append(v)
        ws.append(w)
    rows = np.stack([r for pair in zip(vs, ws) for r in pair], axis=1)  # (count, 2n, 2n)
    signs = np.where(rng.integers(0, 2, size=(count, 2 * n)) == 1, -1, 1).astype(np.int8)
    return rows[..., :n].copy(), rows[..., n:].copy(), signs
