"""Shallow-circuit fidelity to a matrix-product target beyond dense sizes (docs/design.md sections 3.3, 4.5).

Three steps, all on matrix-product states (MPS) over the n support bits s_q
(1 = non-identity Pauli on qubit q); tensors are (left, bit, right) arrays.

1. Eigenvalues. lambda(s) = <final weights| T_d ... T_1 |s> (docs/design.md
   section 3.3): the support chain's gate transitions T act on the one-hot
   pattern, the final weights (1, 1/3) per qubit read it out. As a function
   of s this is the product vector (x)_q (1, 1/3) with the transposed gate
   transitions applied in reverse time order: an exact MPS whose bond stays
   small for shallow circuits (no truncation beyond rounding).

2. Inverse. g(s) ~ 1/lambda(s) as an MPS of bond D, fitted by two-site
   alternating least squares on the weighted cost
   C(g) = sum_s w(s) (lambda(s) g(s) - 1)^2, w(s) = prod_q (1-p, p)[s_q];
   the cost is quadratic in each pair of site tensors, and since
   diag(w lambda^2) is diagonal in s the local normal equations split into
   four independent blocks, one per pair of bits (route of Bertoni et al.,
   PRL 133, 020602 (2024) and Akhtar, Hu, You, Quantum 7, 1026 (2023);
   the sweeps are our own). The residual r(s) = lambda(s) g(s) - 1 bounds
   the bias of the approximate estimator: E[f] - F = 2^-n sum_P
   r(supp P) tr(P rho) tr(P psi), so |bias| <= max_s |r(s)| (Cauchy-Schwarz,
   sum_P tr(P rho)^2 = 2^n tr rho^2 <= 2^n, the same for a pure psi).

3. Snapshots. With G the Pauli-diagonal superoperator G(P) = g(supp P) P,
   f_i = <psi| G(sigma_i) |psi>, sigma_i = U^dag|b><b|U. Per qubit
   G_q(X) = g1 X + (g0 - g1) tr(X) I/2 with the bond matrices g0, g1 of g.
   Shots of one setting share U: with P_b = U^dag X^b U (a Pauli string),
   sigma_b = P_b sigma_0 P_b, and G commutes with Pauli conjugation, so
   f(b) = <psi| P_b G(sigma_0) P_b |psi>. The MPO G(sigma_0) (bond D chi_phi^2,
   chi_phi the bond of U^dag|0>) is built once per setting, P_b by Pauli
   propagation, and every snapshot is one left-to-right sweep of the
   sandwich <psi|P_b O P_b|psi>, batched over snapshots.

Gates must act on neighbouring qubits (chain couplings, brickwork).
"""

from __future__ import annotations

import itertools
import weakref
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, cho_solve

from manybody.errors import InputError
from manybody.measure.clifford import clifford_table
from manybody.measure.eigenvalues import FINAL_WEIGHT, GATE_TRANSITION
from manybody.simulation.sampling import mps_site_tensors
from manybody.simulation.statevector import BASIS_ROTATIONS

#: singular values below this fraction of the largest are dropped (exact MPS up to rounding).
EXACT_CUTOFF = 1e-13
#: the maximum residual is checked on all 2^n patterns up to this many qubits, sampled beyond.
EXHAUSTIVE_QUBITS = 16
#: random patterns drawn when the residual cannot be checked exhaustively.
SAMPLED_PATTERNS = 1 << 16
#: ridge on the unit diagonal of the scaled normal equations of the fit.
RIDGE = 1e-12

_INVERSES: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


# ----------------------------------------------------------------- MPS helpers
def mps_values(tensors, patterns: np.ndarray) -> np.ndarray:
    """Values of an MPS over bits at every row of ``patterns`` (N, n): (N,).

    The left vectors of all rows advance together: both bit values are one
    matrix product each, then each row keeps its own.
    """
    patterns = np.asarray(patterns, dtype=bool)
    vec = np.ones((len(patterns), 1))
    for q, a in enumerate(tensors):
        vec = np.where(patterns[:, q, None], vec @ a[:, 1, :], vec @ a[:, 0, :])
    return vec[:, 0]


def _split(theta: np.ndarray, max_bond: int, right: bool):
    """SVD of a two-site block (l, 2, 2, r); singular values go right (``right``) or left."""
    l, _, _, r = theta.shape
    u, s, vh = np.linalg.svd(theta.reshape(2 * l, 2 * r), full_matrices=False)
    keep = max(1, min(max_bond, int(np.sum(s > EXACT_CUTOFF * s[0]))))
    u, s, vh = u[:, :keep], s[:keep], vh[:keep]
    if right:
        vh = s[:, None] * vh
    else:
        u = u * s
    return u.reshape(l, 2, keep), vh.reshape(keep, 2, r)


def _neighbour_gates(ensemble) -> list[tuple[int, int]]:
    gates = [tuple(sorted(g)) for g in np.asarray(ensemble.gate_qubits).tolist()]
    if any(b != a + 1 for a, b in gates):
        raise InputError("the matrix-product shallow fidelity needs gates on neighbouring qubits "
                         "(a chain coupling); this ensemble has gates on distant qubits")
    return gates


# ----------------------------------------------------------------- 1. eigenvalues
def eigenvalue_mps(ensemble) -> list[np.ndarray]:
    """lambda(s) of the shallow ensemble as an exact MPS over the support bits: n tensors (l, 2, r).

    lambda(s) = <w| T_G ... T_1 |s> with w = (x)_q FINAL_WEIGHT and T the
    support-pattern transition of each gate slot in time order (docs/design.md
    section 3.3), so the MPS is T_1^T ... T_G^T |w>: the transposed
    transitions applied to the product vector, last gate first. A transposed
    transition swaps the gate's two qubits when the slot lists them right to left.
    """
    n = ensemble.n_qubits
    tensors = [FINAL_WEIGHT.reshape(1, 2, 1).copy() for _ in range(n)]
    slots = np.asarray(ensemble.gate_qubits).tolist()
    _neighbour_gates(ensemble)
    for a, b in reversed(slots):
        trans = GATE_TRANSITION.transpose(2, 3, 0, 1)  # [in_a, in_b, out_a, out_b]
        if a > b:
            a, b, trans = b, a, trans.transpose(1, 0, 3, 2)
        theta = np.einsum("ipj,jqk->ipqk", tensors[a], tensors[b])
        theta = np.einsum("pqst,istk->ipqk", trans, theta)
        tensors[a], tensors[b] = _split(theta, 1 << 30, right=True)
    return tensors


# ----------------------------------------------------------------- 2. inverse
def _pair_tensors(lam, p: float):
    """Site tensors of w lambda^2 (diagonal in s: one bit leg) and of w lambda, w = prod (1-p, p)."""
    w = np.array([1.0 - p, p])
    quad = [np.einsum("s,isj,ksl->iksjl", w, a, a).reshape(a.shape[0] ** 2, 2, a.shape[2] ** 2) for a in lam]
    lin = [w[None, :, None] * a for a in lam]
    return quad, lin


def _grow_left(env_q, env_l, g, q_t, l_t):
    """Advance the left environments of g^T A g (A = diag(w lambda^2)) and of b^T g by one site."""
    env_q = np.einsum("xmy,xsa,msn,ysb->anb", env_q, g, q_t, g, optimize=True)
    env_l = np.einsum("xk,xsa,ksl->al", env_l, g, l_t, optimize=True)
    return env_q, env_l


def _grow_right(env_q, env_l, g, q_t, l_t):
    env_q = np.einsum("anb,xsa,msn,ysb->xmy", env_q, g, q_t, g, optimize=True)
    env_l = np.einsum("al,xsa,ksl->xk", env_l, g, l_t, optimize=True)
    return env_q, env_l


def _solve_pair(eq_l, el_l, eq_r, el_r, q1, q2, l1, l2):
    """Minimiser of the cost over one two-site block: four independent normal equations.

    Each block (bits p, q) is Jacobi-scaled (the entries of lambda span many
    orders of magnitude) and solved by Cholesky with a ridge of 1e-12 on the
    unit diagonal, which settles the directions the data do not determine.
    """
    mat = np.einsum("xmy,msn,ntr,arb->stxayb", eq_l, q1, q2, eq_r, optimize=True)
    rhs = np.einsum("xk,ksl,ltm,am->stxa", el_l, l1, l2, el_r, optimize=True)
    dl, dr = eq_l.shape[0], eq_r.shape[0]
    theta = np.empty((dl, 2, 2, dr))
    for s, t in itertools.product(range(2), repeat=2):
        a = mat[s, t].reshape(dl * dr, dl * dr)
        scale = np.sqrt(np.maximum(np.diag(a), np.finfo(float).tiny))
        a = a / scale[:, None] / scale[None, :] + RIDGE * np.eye(dl * dr)
        x = cho_solve(cho_factor(a), rhs[s, t].ravel() / scale)
        theta[:, s, t, :] = (x / scale).reshape(dl, dr)
    return theta


def fit_inverse(lam, bond: int, weight: float = 0.5, sweeps: int = 6) -> list[np.ndarray]:
    """g(s) ~ 1/lambda(s) as an MPS of bond ``bond``: two-site ALS on sum_s w(s) (lambda g - 1)^2.

    ``lam`` from :func:`eigenvalue_mps`; w(s) = prod_q (1 - weight, weight)[s_q]
    (weight 1/2: every support pattern alike). The start is the product
    g(s) = prod_q c_q^(s_q), c_q = 1/lambda of the single-qubit support.
    Sweeps run left to right and back; each two-site block is the exact
    minimiser given the rest, then split by SVD to at most ``bond``.
    """
    n = len(lam)
    quad, lin = _pair_tensors(lam, weight)
    eye = np.eye(n, dtype=bool)
    single = mps_values(lam, eye)
    g = [np.array([1.0, 1.0 / c]).reshape(1, 2, 1) for c in single]
    right = [None] * (n + 1)
    right[n] = (np.ones((1, 1, 1)), np.ones((1, 1)))
    for q in range(n - 1, 0, -1):
        right[q] = _grow_right(*right[q + 1], g[q], quad[q], lin[q])
    for _ in range(sweeps):
        left = [(np.ones((1, 1, 1)), np.ones((1, 1)))]
        for q in range(n - 1):  # left to right
            theta = _solve_pair(*left[q], *right[q + 2], quad[q], quad[q + 1], lin[q], lin[q + 1])
            g[q], g[q + 1] = _split(theta, bond, right=True)
            left.append(_grow_left(*left[q], g[q], quad[q], lin[q]))
        for q in range(n - 2, -1, -1):  # and back
            theta = _solve_pair(*left[q], *right[q + 2], quad[q], quad[q + 1], lin[q], lin[q + 1])
            g[q], g[q + 1] = _split(theta, bond, right=False)
            right[q + 1] = _grow_right(*right[q + 2], g[q + 1], quad[q + 1], lin[q + 1])
    return g


def weighted_rms_residual(lam, g, weight: float = 0.5) -> float:
    """sqrt(sum_s w(s) (lambda(s) g(s) - 1)^2), exactly by MPS contraction (sum_s w(s) = 1)."""
    quad, lin = _pair_tensors(lam, weight)
    env_q, env_l = np.ones((1, 1, 1)), np.ones((1, 1))
    for q in range(len(lam)):
        env_q, env_l = _grow_left(env_q, env_l, g[q], quad[q], lin[q])
    return float(np.sqrt(max(env_q.item() - 2 * env_l.item() + 1.0, 0.0)))
