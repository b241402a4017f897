"""Single-snapshot estimates of <H^2> without expanding H^2 into a table of terms (docs/design.md section 4).

With H = sum_P c_P P, the estimator of H^2 is sum_(P,Q) c_P c_Q o(PQ). When
the light cones of P and Q do not overlap (local ensemble: their supports;
shallow circuits: their forward light cones) the snapshot value factorizes,
o(PQ) = o(P) o(Q), exactly, snapshot by snapshot (docs/design.md section 3).
So, per snapshot,

    o(H^2) = E^2 - sum_(near P,Q) c_P c_Q o(P) o(Q) + sum_(near P,Q) c_P c_Q o(PQ),

with E = sum_P c_P o(P) the energy estimate. Only near pairs appear; the
anticommuting ones cancel in pairs (PQ = -QP), the commuting ones give
PQ = +-R with R a Pauli string. The cost grows like the number of near
pairs, not like the square of the Hamiltonian.

Local ensemble: a two-site product R = sigma^x_a sigma^y_b has o(R) =
o(sigma^x_a) o(sigma^y_b), so the sum of all of them is a bilinear form in
the one-site values, f W f^T per snapshot with W sparse (3n x 3n): no
(snapshots x products) table is built for them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from hamiltonians.pauli import product_phase
from manybody.measure.paulis import AXIS_OF_CODE, BASIS_PAULI


@dataclass(frozen=True)
class SquareTerms:
    """What o(H^2) needs beyond the terms of H: the near pairs and the strings of their products."""

    near: sp.csr_matrix  # (T, T) c_P c_Q on near pairs (both orders, and P = Q)
    codes: np.ndarray  # (U, n) distinct non-identity products R of commuting near pairs
    weights: np.ndarray  # (U,) sum of c_P c_Q (+-1) over the pairs with product R
    lam: np.ndarray  # (U,) eigenvalue of each R
    constant: float  # sum of c_P c_Q (+-1) over the pairs whose product is the identity
    singles: np.ndarray | None = None  # local ensemble: (3n, n) the one-site strings, index axis * n + qubit
    singles_lam: np.ndarray | None = None  # (3n,) their eigenvalues
    bilinear: sp.csr_matrix | None = None  # (3n, 3n) weights of the two-site products (not in ``codes``)


def cones(codes: np.ndarray, ensemble) -> np.ndarray:
    """(T, n) mask of the qubits each string's snapshot value can depend on (its light cone)."""
    support = codes != 0
    if ensemble.kind == "global":
        return np.ones_like(support)
    if ensemble.is_local:
        return support
    from manybody.measure.eigenvalues import light_cone

    out = np.zeros_like(support)
    for t, row in enumerate(support):
        out[t, light_cone(np.flatnonzero(row), ensemble.layers)[0]] = True
    return out


def square_terms(codes: np.ndarray, coeffs: np.ndarray, ensemble, eigenvalue) -> SquareTerms:
    """Near pairs of a term table and the products of the commuting ones (``eigenvalue``: codes -> lambda)."""
    cone = cones(codes, ensemble).astype(np.float64)
    i, j = np.nonzero(cone @ cone.T)  # the diagonal P = Q is near too
    near = sp.csr_matrix((coeffs[i] * coeffs[j], (i, j)), shape=(len(codes), len(codes)))
    x, z = (codes & 1).astype(np.uint8), (codes >> 1).astype(np.uint8)
    x3, z3, k = product_phase(x[i], z[i], x[j], z[j])
    commuting = k % 2 == 0
    sign = np.where(k % 4 == 0, 1.0, -1.0)
    products = (x3 + 2 * z3).astype(np.uint8)[commuting]
    weight = (coeffs[i] * coeffs[j] * sign)[commuting]
    identity = ~products.any(axis=1)
    distinct, inverse = np.unique(products[~identity], axis=0, return_inverse=True)
    weights = np.bincount(inverse.ravel(), weights=weight[~identity], minlength=len(distinct))
    lam = np.array([eigenvalue(c) for c in distinct])
    square = SquareTerms(near, distinct, weights, lam, float(weight[identity].sum()))
    return _two_site_bilinear(square, eigenvalue) if ensemble.is_local else square


def _two_site_bilinear(square: SquareTerms, eigenvalue) -> SquareTerms:
    """Move the two-site products whose eigenvalue is the product of their one-site ones into a bilinear form."""
    n = square.codes.shape[1]
    singles = np.zeros((3 * n, n), dtype=np.uint8)
    singles[np.arange(3 * n), np.tile(np.arange(n), 3)] = np.repeat(BASIS_PAULI, n)
    singles_lam = np.array([eigenvalue(c) for c in singles])
    two = np.flatnonzero(np.count_nonzero(square.codes, axis=1) == 2)
    sites = np.sort(np.nonzero(square.codes[two])[1].reshape(-1, 2), axis=1)
    index = AXIS_OF_CODE[np.take_along_axis(square.codes[two], sites, axis=1)] * n + sites  # (pairs, 2)
    factorizes = np.isclose(square.lam[two], singles_lam[index[:, 0]] * singles_lam[index[:, 1]], rtol=1e-12)
    two, index = two[factorizes], index[factorizes]
    if not len(two):
        return square
    bilinear = sp.csr_matrix((square.weights[two], (index[:, 0], index[:, 1])), shape=(3 * n, 3 * n))
    rest = np.setdiff1d(np.arange(len(square.codes)), two)
    return SquareTerms(square.near, square.codes[rest], square.weights[rest], square.lam[rest], square.constant,
                       singles, singles_lam, bilinear)


def square_values(values: np.ndarray, energy: np.ndarray, square: SquareTerms, product_values) -> np.ndarray:
    """o(H^2) per snapshot (N,), from the term values (N, T), the energies (N,) and the product strings' values.

    ``product_values(codes, lam) -> (N, U)`` gives the single-snapshot estimates of the strings R.
    """
    rows = np.ascontiguousarray(values.T, dtype=np.float64)  # (T, N): sparse products and sums run along rows
    factorized = np.sum(np.asarray(square.near.T @ rows) * rows, axis=0)
    explicit = product_values(square.codes, square.lam) @ square.weights if len(square.codes) else 0.0
    if square.bilinear is not None:  # sum over the two-site products of w f_a f_b
        f = np.ascontiguousarray(product_values(square.singles, square.singles_lam).T, dtype=np.float64)  # (3n, N)
        explicit = explicit + np.sum(np.asarray(square.bilinear @ f) * f, axis=0)
    return energy**2 - factorized + explicit + square.constant
