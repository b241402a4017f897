"""Exact values in the schema of the results dataset, so that ``results - exact`` is one expression."""

from __future__ import annotations

import numpy as np
import xarray as xr

from hamiltonians.pauli import PauliExpansion
from manybody import __version__
from manybody.references import exact
from manybody.schema import AXES, reciprocal_points, structure_factor, term_table


def _pauli(n, letters_at) -> PauliExpansion:
    s = ["I"] * n
    for q, letter in letters_at:
        s[q] = letter
    return PauliExpansion.from_strings("".join(s))


def reference_dataset(model, psi: np.ndarray, subsystems=(), label: dict | None = None) -> xr.Dataset:
    """Exact energy, densities, variance, magnetization, correlations, purities and I2 of a dense state."""
    n, n_sites = model.n_qubits, model.n_sites
    ham = model.hamiltonian
    codes, coeffs, density = term_table(ham, model.qubit_site, n_sites)
    op = ham.simplify()
    values = exact.pauli_expectations(op, psi)
    energy = float(np.real(values @ coeffs))
    h2 = float(np.real(exact.expectation((ham * ham).combined(atol=1e-12), psi)))
    pos = model.lattice.positions
    coords = {"axis": list(AXES), "axis_a": list(AXES), "axis_b": list(AXES), "site": np.arange(n_sites),
              "x": ("site", pos[:, 0]), "y": ("site", pos[:, 1])}
    data = {"energy": ((), energy), "energy_density": (("site",), np.real(values @ density)),
            "energy_variance": ((), h2 - energy**2)}
    if n == n_sites:
        singles = [_pauli(n, [(q, a)]) for a in AXES for q in range(n)]
        mag = np.array([exact.expectation(p, psi) for p in singles]).reshape(3, n)
        corr = np.full((3, 3, n, n), np.nan)
        for a, la in enumerate(AXES):
            for b, lb in enumerate(AXES):
                for qa in range(n):
                    for qb in range(n):
                        if qa != qb:
                            corr[a, b, qa, qb] = exact.expectation(_pauli(n, [(qa, la), (qb, lb)]), psi)
        coords.update(site_a=np.arange(n), site_b=np.arange(n))
        data["magnetization"] = (("axis", "site"), mag)
        data["correlation"] = (("axis_a", "axis_b", "site_a", "site_b"), corr)
        data["connected_correlation"] = (("axis_a", "axis_b", "site_a", "site_b"),
                                         corr - mag[:, None, :, None] * mag[None, :, None, :])
        single = np.array([exact.purity(exact.reduced_density_matrix(psi, [q])) for q in range(n)])
        mi = np.full((n, n), np.nan)
        for qa in range(n):
            for qb in range(qa + 1, n):
                pair = exact.purity(exact.reduced_density_matrix(psi, [qa, qb]))
                mi[qa, qb] = mi[qb, qa] = -np.log(single[qa]) - np.log(single[qb]) + np.log(pair)
        data["mutual_information"] = (("site_a", "site_b"), mi)
        reciprocal = reciprocal_points(model)
        if reciprocal is not None:
            q, phase = reciprocal
            coords.update(q=np.arange(len(q)), qx=("q", q[:, 0]), qy=("q", q[:, 1]))
            data["structure_factor"] = (("axis", "q"), structure_factor(corr, phase))
    if subsystems:
        qubit_site = np.asarray(model.qubit_site)
        purity = np.array([exact.purity(exact.reduced_density_matrix(
            psi, np.flatnonzero(np.isin(qubit_site, s.sites)))) for s in subsystems])
        coords["subsystem"] = [s.label for s in subsystems]
        coords["subsystem_size"] = ("subsystem", [len(s.sites) for s in subsystems])
        data["purity"] = (("subsystem",), purity)
        data["renyi2"] = (("subsystem",), -np.log(purity))
    attrs = {"kind": "exact reference", "tool_version": __version__, "label": str(label or {})}
    return xr.Dataset(data, coords=coords, attrs=attrs)
