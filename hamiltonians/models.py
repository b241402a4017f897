"""Lattice models as Pauli sums, in Pauli (sigma) units (docs/design.md section 2).

Every spin model acts on one qubit per site (qubit q = site q). The
Fermi-Hubbard model acts on two qubits per site: qubit 2i is site i spin
up, qubit 2i+1 is site i spin down, mapped by Jordan-Wigner along the qubit
order (the convention of openfermion's ``fermi_hubbard``).

Spin-model couplings can be given for spin operators S = sigma/2 instead
(``units="spin"``): a term with k spin factors is then multiplied by 2^-k.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .lattice import Lattice
from .pauli import PauliExpansion

#: model kind -> default parameters (every key allowed in the spec).
MODEL_PARAMETERS: dict[str, dict[str, float]] = {
    "tfim": {"J": 1.0, "h": 1.0},
    "xxz": {"J": 1.0, "Delta": 1.0, "h": 0.0},
    "heisenberg": {"J": 1.0},
    "j1j2": {"J1": 1.0, "J2": 0.5},
    "xy": {"J": 1.0, "gamma": 0.0, "h": 0.0},
    "kitaev": {"Kx": 1.0, "Ky": 1.0, "Kz": 1.0},
    "hubbard": {"t": 1.0, "U": 4.0, "mu": 0.0},
    "custom": {},
}
MODEL_KINDS = tuple(MODEL_PARAMETERS)
UNITS = ("pauli", "spin")


class ModelError(ValueError):
    """A model that cannot be built as asked."""


@dataclass(frozen=True)
class Term:
    """A custom term: ``pauli`` (one letter per site of a pair) on every site, bond or next bond."""

    pauli: str
    on: str
    coefficient: float


def _scale(units: str, k: int) -> float:
    return 0.5**k if units == "spin" else 1.0


def tfim(lat: Lattice, J: float = 1.0, h: float = 1.0, units: str = "pauli") -> PauliExpansion:
    """H = -J sum_<ij> Z_i Z_j - h sum_i X_i (Pfeuty's form)."""
    n = lat.n_sites
    return (PauliExpansion.from_local(n, "ZZ", lat.bonds, -J * _scale(units, 2))
            + PauliExpansion.from_local(n, "X", lat.pairs("sites"), -h * _scale(units, 1)))


def _exchange(n, pairs, jx, jy, jz) -> PauliExpansion:
    out = PauliExpansion.zero(n)
    for letter, j in (("XX", jx), ("YY", jy), ("ZZ", jz)):
        if j != 0 and len(pairs):
            out = out + PauliExpansion.from_local(n, letter, pairs, j)
    return out


def xxz(lat: Lattice, J=1.0, Delta=1.0, h=0.0, units="pauli") -> PauliExpansion:
    """H = J sum_<ij> (X_i X_j + Y_i Y_j + Delta Z_i Z_j) + h sum_i Z_i."""
    n, s2, s1 = lat.n_sites, _scale(units, 2), _scale(units, 1)
    out = _exchange(n, lat.bonds, J * s2, J * s2, J * Delta * s2)
    if h:
        out = out + PauliExpansion.from_local(n, "Z", lat.pairs("sites"), h * s1)
    return out


def heisenberg(lat: Lattice, J=1.0, units="pauli") -> PauliExpansion:
    """H = J sum_<ij> sigma_i . sigma_j (in spin units: J sum S_i . S_j)."""
    s2 = _scale(units, 2)
    return _exchange(lat.n_sites, lat.bonds, J * s2, J * s2, J * s2)


def j1j2(lat: Lattice, J1=1.0, J2=0.5, units="pauli") -> PauliExpansion:
    """H = J1 sum_<ij> sigma.sigma + J2 sum_<<ij>> sigma.sigma (nearest, next-nearest)."""
    s2 = _scale(units, 2)
    return (_exchange(lat.n_sites, lat.bonds, J1 * s2, J1 * s2, J1 * s2)
            + _exchange(lat.n_sites, lat.next_bonds, J2 * s2, J2 * s2, J2 * s2))


def xy(lat: Lattice, J=1.0, gamma=0.0, h=0.0, units="pauli") -> PauliExpansion:
    """H = J sum_<ij> [(1+gamma)/2 X X + (1-gamma)/2 Y Y] + h sum_i Z_i."""
    n, s2, s1 = lat.n_sites, _scale(units, 2), _scale(units, 1)
    out = _exchange(n, lat.bonds, J * (1 + gamma) / 2 * s2, J * (1 - gamma) / 2 * s2, 0.0)
    if h:
        out = out + PauliExpansion.from_local(n, "Z", lat.pairs("sites"), h * s1)
    return out


def kitaev_bond_letters(lat: Lattice) -> np.ndarray:
    """The Kitaev label of every honeycomb bond: "Z" for vertical bonds, "X" and "Y" for the others.

    With the honeycomb cell of :mod:`hamiltonians.lattice`, bonds point along
    (0, 1) [z], (sqrt3/2, 1/2) [x] and (-sqrt3/2, 1/2) [y].
    """
    if lat.kind != "honeycomb":
        raise ModelError(f"the Kitaev model needs a honeycomb lattice, not {lat.kind}")
    o = lat.bond_orientation
    return np.where(np.abs(o[:, 0]) < 1e-6, "Z", np.where(o[:, 0] > 0, "X", "Y"))


def kitaev(lat: Lattice, Kx=1.0, Ky=1.0, Kz=1.0, units="pauli") -> PauliExpansion:
    """H = -sum_a K_a sum_{a-bonds} sigma^a_i sigma^a_j on the honeycomb lattice."""
    labels = kitaev_bond_letters(lat)
    s2 = _scale(units, 2)
    out = PauliExpansion.zero(lat.n_sites)
    for a, k in (("X", Kx), ("Y", Ky), ("Z", Kz)):
        sel = lat.bonds[labels == a]
        if len(sel):
            out = out + PauliExpansion.from_local(lat.n_sites, a + a, sel, -k * s2)
    return out


def hubbard(lat: Lattice, t=1.0, U=4.0, mu=0.0, units="pauli") -> PauliExpansion:
    """H = -t sum_<ij>,s (c+_is c_js + h.c.) + U sum_i n_iu n_id - mu sum_is n_is.

    Jordan-Wigner (openfermion) on 2n qubits: qubit 2i+s for site i, spin s
    (0 up, 1 down). Each term is anchored to the orbitals it names, not to
    its string of Z factors, so energy densities stay local.
    """
    if units != "pauli":
        raise ModelError("units = 'spin' applies to spin models, not to hubbard")
    from openfermion import FermionOperator, jordan_wigner, hermitian_conjugated

    nq = 2 * lat.n_sites
    out = PauliExpansion.zero(nq)

    def add(fop, orbitals):
        nonlocal out
        out = out + PauliExpansion.from_qubit_operator(jordan_wigner(fop), nq, anchor=orbitals)

    for i, j in lat.bonds.tolist():
        for s in (0, 1):
            a, b = 2 * i + s, 2 * j + s
            hop = FermionOperator(((a, 1), (b, 0)), -t)
            add(hop + hermitian_conjugated(hop), (a, b))
    for i in range(lat.n_sites):
        up, dn = 2 * i, 2 * i + 1
        if U:
            add(FermionOperator(((up, 1), (up, 0), (dn, 1), (dn, 0)), U), (up, dn))
        if mu:
            for a in (up, dn):
                add(FermionOperator(((a, 1), (a, 0)), -mu), (a,))
    return out.simplify(atol=1e-14)


def particle_number(n_sites: int) -> PauliExpansion:
    """N = sum_a n_a = sum_a (1 - Z_a)/2 over 2 n_sites spin orbitals (Jordan-Wigner)."""
    nq = 2 * n_sites
    return (PauliExpansion.identity(nq, nq / 2)
            + PauliExpansion.from_local(nq, "Z", np.arange(nq)[:, None], -0.5))


def custom_terms(lat: Lattice, terms, units="pauli", n_qubits=None) -> PauliExpansion:
    """Sum of custom terms; for a pair, letter 0 acts on the lower-numbered site."""
    n = lat.n_sites if n_qubits is None else n_qubits
    out = PauliExpansion.zero(n)
    for term in terms:
        pairs = lat.pairs(term.on)
        if pairs.shape[1] != len(term.pauli):
            raise ModelError(
                f"custom term {term.pauli!r} has {len(term.pauli)} letter(s) but {term.on!r} "
                f"needs {pairs.shape[1]}")
        if len(pairs):
            out = out + PauliExpansion.from_local(n, term.pauli, pairs,
                                                  term.coefficient * _scale(units, len(term.pauli)))
    return out


_BUILDERS = {"tfim": tfim, "xxz": xxz, "heisenberg": heisenberg, "j1j2": j1j2, "xy": xy,
             "kitaev": kitaev, "hubbard": hubbard}


def build_hamiltonian(lat: Lattice, kind: str, params: dict, terms=(), units="pauli") -> PauliExpansion:
    """The named model plus any custom terms."""
    if kind not in MODEL_PARAMETERS:
        raise ModelError(f"unknown model kind {kind!r}; allowed: {', '.join(MODEL_KINDS)}")
    full = {**MODEL_PARAMETERS[kind], **params}
    if kind == "custom":
        if not terms:
            raise ModelError("a custom model needs at least one [[model.term]]")
        return custom_terms(lat, terms, units).simplify()
    ham = _BUILDERS[kind](lat, units=units, **full)
    if terms:
        if kind == "hubbard":
            raise ModelError("custom terms cannot be added to the hubbard model (its qubits are spin orbitals)")
        ham = ham + custom_terms(lat, terms, units)
    return ham.simplify()


def qubit_sites(lat: Lattice, kind: str) -> np.ndarray:
    """Site of every qubit: the identity for spin models, q // 2 for Hubbard."""
    if kind == "hubbard":
        return np.repeat(np.arange(lat.n_sites), 2)
    return np.arange(lat.n_sites)
