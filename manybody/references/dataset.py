"""Exact values in the schema of the results dataset, so that ``results - exact`` is one expression.

Every reference (dense vector or matrix product state) reduces to the same
few numbers: the expectation value of each Hamiltonian term, the energy
variance, the one- and two-site Pauli expectations of all qubits and the
purities of the requested subsystems. :func:`assemble` turns them into the
dataset (docs/formats.md, "Results"); :func:`reference_dataset` computes
them for a dense state.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from manybody import __version__
from manybody.references import exact
from manybody.schema import reciprocal_points, site_coords, structure_factor, structure_factor_coords, term_table


def single_purities(mag: np.ndarray) -> np.ndarray:
    """tr rho_q^2 = (1 + |<sigma_q>|^2) / 2 for every qubit, from mag (3, n).

    rho_A = 2^(-|A|) sum_P <P> P over the Paulis P on A, hence
    tr rho_A^2 = 2^(-|A|) sum_P <P>^2 (docs/design.md section 4).
    """
    return (1 + np.sum(mag**2, axis=0)) / 2


def pair_purities(mag: np.ndarray, corr: np.ndarray) -> np.ndarray:
    """tr rho_qr^2 = (1 + |m_q|^2 + |m_r|^2 + sum_ab <s^a_q s^b_r>^2) / 4 for all pairs (NaN where q = r).

    The same Pauli expansion as :func:`single_purities`, on two qubits.
    """
    m2 = np.sum(mag**2, axis=0)
    return (1 + m2[:, None] + m2[None, :] + np.sum(corr**2, axis=(0, 1))) / 4


def mutual_information(mag: np.ndarray, corr: np.ndarray) -> np.ndarray:
    """I2(q:r) = S2(q) + S2(r) - S2(qr) in nats for all pairs of qubits (NaN on the diagonal)."""
    s1 = -np.log(single_purities(mag))
    return s1[:, None] + s1[None, :] + np.log(pair_purities(mag, corr))


def assemble(model, term_values: np.ndarray, variance: float, mag: np.ndarray | None, corr: np.ndarray | None,
             purities: np.ndarray | None, subsystems=(), attrs: dict | None = None) -> xr.Dataset:
    """The reference dataset from expectation values.

    ``term_values`` are <P_t> in the order of ``model.hamiltonian.simplify()``
    (the order of :func:`manybody.schema.term_table`); ``mag`` (3, n) and
    ``corr`` (3, 3, n, n) over qubits are used when every qubit is a site;
    ``purities`` holds tr rho_A^2 per subsystem (NaN where unknown).
    """
    n, n_sites = model.n_qubits, model.n_sites
    codes, coeffs, density = term_table(model.hamiltonian, model.qubit_site, n_sites)
    energy = float(np.real(term_values @ coeffs))
    coords = site_coords(model, n_sites)
    data = {"energy": ((), energy), "energy_density": (("site",), np.real(term_values @ density)),
            "energy_variance": ((), float(variance))}
    if n == n_sites and mag is not None:
        coords.update(site_a=np.arange(n), site_b=np.arange(n))
        pair = ("axis_a", "axis_b", "site_a", "site_b")
        data["magnetization"] = (("axis", "site"), mag)
        data["correlation"] = (pair, corr)
        data["connected_correlation"] = (pair, corr - mag[:, None, :, None] * mag[None, :, None, :])
        data["mutual_information"] = (("site_a", "site_b"), mutual_information(mag, corr))
        reciprocal = reciprocal_points(model)
        if reciprocal is not None:
            coords.update(structure_factor_coords(reciprocal))
            data["structure_factor"] = (("axis", "q"), structure_factor(corr, reciprocal[1]))
    if subsystems:
        coords["subsystem"] = [s.label for s in subsystems]
        coords["subsystem_size"] = ("subsystem", [len(s.sites) for s in subsystems])
        data["purity"] = (("subsystem",), np.asarray(purities, dtype=float))
        data["renyi2"] = (("subsystem",), -np.log(np.asarray(purities, dtype=float)))
    return xr.Dataset(data, coords=coords, attrs=dict(attrs or {}))


def subsystem_qubits(model, subsystem) -> np.ndarray:
    """The qubits of the sites of a subsystem (all spin orbitals of a Hubbard site)."""
    return np.flatnonzero(np.isin(np.asarray(model.qubit_site), list(subsystem.sites)))


def reference_dataset(model, psi: np.ndarray, subsystems=(), label: dict | None = None) -> xr.Dataset:
    """Exact energy, densities, variance, magnetization, correlations, purities and I2 of a dense state.

    Expectation values come from bitmask kernels on the state vector
    (:mod:`manybody.references.exact`), never from a matrix per Pauli string.
    """
    psi = np.asarray(psi, dtype=complex)
    ham = model.hamiltonian
    values = exact.pauli_expectations(ham.simplify(), psi)
    variance = exact.energy_variance(ham, psi)
    mag = corr = None
    if model.n_qubits == model.n_sites:
        mag, corr = exact.local_pauli_moments(psi)
    purities = [exact.subsystem_purity(psi, subsystem_qubits(model, s)) for s in subsystems]
    attrs = {"kind": "exact reference", "tool_version": __version__, "label": str(label or {})}
    return assemble(model, values, variance, mag, corr, purities, subsystems, attrs)
