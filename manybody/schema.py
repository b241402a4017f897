"""The results schema shared by estimates and exact references (docs/formats.md, "Results").

Both sides build their datasets from these pieces so that ``results - exact``
is one xarray expression: the axis names, the site coordinates, how each
Hamiltonian term is shared among sites for the energy density, and the
structure factor on the reciprocal lattice.
"""

from __future__ import annotations

import numpy as np

AXES = ("X", "Y", "Z")


def site_coords(model, n_sites: int) -> dict:
    """Coordinates ``axis``, ``axis_a``, ``axis_b``, ``site`` with positions ``x`` and ``y``."""
    if model is not None:
        pos = model.lattice.positions
    else:
        pos = np.column_stack([np.arange(n_sites), np.zeros(n_sites)])
    return {"axis": list(AXES), "axis_a": list(AXES), "axis_b": list(AXES), "site": np.arange(n_sites),
            "x": ("site", pos[:, 0]), "y": ("site", pos[:, 1])}


def term_table(ham, qubit_site, n_sites):
    """One-qubit codes (I 0, X 1, Z 2, Y 3), real coefficients and energy-density weights of a Pauli sum.

    Each term is split equally among the sites it acts on (its anchors), so
    the density summed over sites is the energy; a constant is shared by all
    sites.
    """
    from manybody.measure.paulis import pauli_string_codes

    op = ham.simplify()
    codes = pauli_string_codes(op.x_bits, op.z_bits)
    coeffs = op.real_if_close().real
    density = np.zeros((len(op), n_sites))
    anchor = op.anchor_bits
    for t in range(len(op)):
        sites = np.unique(qubit_site[np.flatnonzero(anchor[t])])
        if len(sites) == 0:
            sites = np.arange(n_sites)
        density[t, sites] = coeffs[t] / len(sites)
    return codes, coeffs, density


def reciprocal_points(model):
    """q = sum_i (m_i / L_i) b_i on a periodic lattice (a_i . b_j = 2 pi delta_ij) and the phases e^(i q . r)."""
    if model is None or model.lattice.kind == "graph" or any(b != "periodic" for b in model.lattice.boundary):
        return None
    lat = model.lattice
    recip = 2 * np.pi * np.linalg.pinv(lat.vectors).T  # rows b_i with a_i . b_j = 2 pi delta_ij
    grids = np.meshgrid(*[np.arange(s) / s for s in lat.size], indexing="ij")
    q = np.stack([g.ravel() for g in grids], axis=1) @ recip
    return q, np.exp(1j * q @ lat.positions.T)


def structure_factor(corr: np.ndarray, phase: np.ndarray) -> np.ndarray:
    """S(q) = (1/n) sum_ab e^(i q.(r_a - r_b)) <s^x_a s^x_b> per axis x, with <s^x_a s^x_a> = 1.

    ``corr`` (3, 3, n, n) with NaN on the diagonal, ``phase`` (n_q, n) = e^(i q.r).
    """
    n = corr.shape[-1]
    same_axis = np.stack([np.nan_to_num(corr[a, a]) + np.eye(n) for a in range(3)])
    return np.real(np.einsum("qa,xab,qb->xq", phase, same_axis, phase.conj())) / n


def structure_factor_coords(reciprocal) -> dict:
    q = reciprocal[0]
    return {"q": np.arange(len(q)), "qx": ("q", q[:, 0]), "qy": ("q", q[:, 1])}
