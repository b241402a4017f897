"""Fermionic observables of the Hubbard model: densities, double occupancy, correlation maps, bond hopping.

Qubit 2i is site i with spin up, 2i+1 site i with spin down, Jordan-Wigner
along the qubit order (docs/design.md section 2; the convention of
:func:`hamiltonians.models.hubbard`). Every quantity is written as a fermion
operator, mapped by openfermion's ``jordan_wigner`` and converted to a
:class:`hamiltonians.pauli.PauliExpansion`:

- ``density`` (spin, site): <n_is>;
- ``double_occupancy`` (site): <n_iu n_id>;
- ``charge_correlation`` (site_a, site_b): <n_i n_j>, n_i = n_iu + n_id;
- ``spin_correlation`` (site_a, site_b): <S^z_i S^z_j>, S^z_i = (n_iu - n_id)/2;
- ``hopping`` (bond): sum_s <c+_is c_js + c+_js c_is> on each lattice bond
  (the kinetic energy of the bond is -t times this).

All are linear in rho, so each is the mean of one number per snapshot
(single-snapshot Pauli estimates, Huang, Kueng, Preskill, Nat. Phys. 16, 1050
(2020)) and its error bar the jackknife over blocks of settings. The
Jordan-Wigner images of the densities and their products are Z strings of
weight at most two; their sums come from the one-site Z columns and their
Gram matrix (one matrix product per chunk; for circuit ensembles near pairs
are propagated explicitly, docs/design.md section 3.4). Every other string
(the hopping strings with their Z tails) is evaluated by
:func:`manybody.estimation.accumulators.energy.term_values`. A quantity
needing a string that no snapshot made visible is NaN with a warning.
"""

from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp

from hamiltonians.pauli import PauliExpansion
from manybody.estimation.accumulators.base import Accumulator, put
from manybody.estimation.accumulators.energy import term_values
from manybody.measure.paulis import pauli_string_codes, single_site_codes

#: the variables in the order of the stacked quantity vector
NAMES = ("density", "double_occupancy", "charge_correlation", "spin_correlation", "hopping")


def hubbard_operators(n_sites: int, bonds) -> dict:
    """The fermion operators of every quantity (openfermion FermionOperator), by variable name."""
    from openfermion import FermionOperator

    def number(a):
        return FermionOperator(((a, 1), (a, 0)))

    dens = [[number(2 * i + s) for i in range(n_sites)] for s in (0, 1)]
    charge = [dens[0][i] + dens[1][i] for i in range(n_sites)]
    spin = [0.5 * (dens[0][i] - dens[1][i]) for i in range(n_sites)]
    hops = []
    for i, j in np.asarray(bonds, dtype=int).reshape(-1, 2).tolist():
        hops.append(sum((FermionOperator(((2 * i + s, 1), (2 * j + s, 0)))
                         + FermionOperator(((2 * j + s, 1), (2 * i + s, 0))) for s in (0, 1)), FermionOperator()))
    return {"density": [op for row in dens for op in row],
            "double_occupancy": [dens[0][i] * dens[1][i] for i in range(n_sites)],
            "charge_correlation": [charge[i] * charge[j] for i in range(n_sites) for j in range(n_sites)],
            "spin_correlation": [spin[i] * spin[j] for i in range(n_sites) for j in range(n_sites)],
            "hopping": hops}


def linear_forms(expansions, n_qubits: int):
    """Each Pauli sum as c0 + sum_a c_a Z_a + sum_(a<b) c_ab Z_a Z_b + sum_t d_t P_t.

    Returns (const (Q,), lin (Q, n) sparse, quad (Q, n*n) sparse over a*n + b with a < b,
    codes (T, n) of the other strings, other (Q, T) sparse).
    """
    const = np.zeros(len(expansions))
    lin, quad, other, strings = ([], [], []), ([], [], []), ([], [], []), {}
    for q, op in enumerate(expansions):
        op = op.combined(atol=1e-14)
        codes = pauli_string_codes(op.x_bits, op.z_bits)
        coeffs = op.coeffs.real
        for c, row in zip(coeffs, codes):
            sup = np.flatnonzero(row)
            if len(sup) == 0:
                const[q] += c
            elif np.all(row[sup] == 2) and len(sup) <= 2:
                target, col = (lin, sup[0]) if len(sup) == 1 else (quad, sup[0] * n_qubits + sup[1])
                target[0].append(q), target[1].append(col), target[2].append(c)
            else:
                t = strings.setdefault(row.tobytes(), len(strings))
                other[0].append(q), other[1].append(t), other[2].append(c)
    m = len(expansions)
    codes = (np.frombuffer(b"".join(strings), dtype=np.uint8).reshape(len(strings), n_qubits)
             if strings else np.zeros((0, n_qubits), np.uint8))

    def matrix(parts, cols):
        return sp.csr_matrix((parts[2], (parts[0], parts[1])), shape=(m, cols))

    return const, matrix(lin, n_qubits), matrix(quad, n_qubits**2), codes, matrix(other, len(codes))


class Hubbard(Accumulator):
    def __init__(self, setup):
        super().__init__(setup)
        from openfermion import jordan_wigner

        model = setup.model
        self.n_sites, n = model.n_sites, setup.n_qubits
        self.bonds = np.asarray(model.lattice.bonds, dtype=int).reshape(-1, 2)
        ops = hubbard_operators(self.n_sites, self.bonds)
        self.sizes = [len(ops[name]) for name in NAMES]
        expansions = [PauliExpansion.from_qubit_operator(jordan_wigner(op), n) for name in NAMES for op in ops[name]]
        self.const, self.lin, self.quad, self.codes, self.other = linear_forms(expansions, n)
        self.lam_terms = np.array([setup.lam.of(c) for c in self.codes])
        self.near = np.array(setup.near_pairs, dtype=int).reshape(-1, 2)
        self.seen_z, self.seen_zz = np.zeros(n), np.zeros((n, n))
        self.seen_near, self.seen_other = np.zeros(len(self.near)), np.zeros(len(self.codes))

    @classmethod
    def build(cls, setup, options):
        model = setup.model
        if model is None or model.spec.kind != "hubbard" or setup.n_qubits != 2 * model.n_sites:
            return None
        return cls(setup)

    def merge_state(self, other):
        """dask parts: how often each string was visible."""
        for name in ("seen_z", "seen_zz", "seen_near", "seen_other"):
            setattr(self, name, getattr(self, name) + getattr(other, name))

    def add(self, chunk):
        setup, n = self.setup, self.setup.n_qubits
        if setup.local:
            z = chunk.columns[:, 2, :]
        else:
            z = np.column_stack([chunk.values(single_site_codes(q, 2, n)) for q in range(n)])
        self.sums.add("z", chunk.onehot, z)
        self.sums.add_gram("zz", chunk.runs, z)
        seen = (z != 0).astype(np.float32)  # counts: exact in float32 below 2^24 snapshots per chunk
        self.seen_z += seen.sum(axis=0)
        self.seen_zz += seen.T @ seen
        if len(self.near):
            zz = np.column_stack([chunk.values(_zz_codes(a, b, n)) for a, b in self.near])
            self.sums.add("near", chunk.onehot, zz)
            self.seen_near += np.count_nonzero(zz, axis=0)
        if len(self.codes):
            values = term_values(self.codes, self.lam_terms, chunk)
            self.sums.add("other", chunk.onehot, values)
            self.seen_other += np.count_nonzero(values, axis=0)

    def _pair_means(self, s):
        zz = s["zz"] / s["n"]
        if "near" in s:
            a, b = self.near.T
            zz[a, b] = zz[b, a] = s["near"] / s["n"]
        return zz

    def estimates(self, s):
        values = self.const + self.lin @ (s["z"] / s["n"]) + self.quad @ self._pair_means(s).ravel()
        if "other" in s:
            values = values + self.other @ (s["other"] / s["n"])
        return {"hubbard": values}

    def _unseen(self):
        seen_zz = self.seen_zz.copy()
        if len(self.near):
            a, b = self.near.T
            seen_zz[a, b] = seen_zz[b, a] = self.seen_near
        missing = (abs(self.lin) @ (self.seen_z == 0) + abs(self.quad) @ (seen_zz.ravel() == 0)
                   + abs(self.other) @ (self.seen_other == 0))
        return missing > 0

    def variables(self, full, err, data, coords):
        value = np.array(full["hubbard"], dtype=float)
        error = np.array(err["hubbard"], dtype=float)
        unseen = self._unseen()
        if unseen.any():
            warnings.warn(f"{int(unseen.sum())} Hubbard entries need a Pauli string that no snapshot measured: "
                          "they are NaN", RuntimeWarning, stacklevel=3)
            value[unseen] = error[unseen] = np.nan
        n = self.n_sites
        coords.update({"spin": ["up", "down"], "site_a": np.arange(n), "site_b": np.arange(n),
                       "bond": np.arange(len(self.bonds)), "bond_site_a": ("bond", self.bonds[:, 0]),
                       "bond_site_b": ("bond", self.bonds[:, 1])})
        dims = {"density": ("spin", "site"), "double_occupancy": ("site",),
                "charge_correlation": ("site_a", "site_b"), "spin_correlation": ("site_a", "site_b"),
                "hopping": ("bond",)}
        shapes = {"density": (2, n), "double_occupancy": (n,), "charge_correlation": (n, n),
                  "spin_correlation": (n, n), "hopping": (len(self.bonds),)}
        start = 0
        for name, size in zip(NAMES, self.sizes):
            part = slice(start, start + size)
            start += size
            put(data, name, dims[name], value[part].reshape(shapes[name]),
                {name: error[part].reshape(shapes[name])})


def _zz_codes(a: int, b: int, n: int) -> np.ndarray:
    codes = np.zeros(n, dtype=np.uint8)
    codes[[a, b]] = 2
    return codes
