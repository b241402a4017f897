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
   Sorted by the weight w of the support the bound tightens: with m_w the
   largest |r| at weight w and T_w = 2^-n sum_{|P| = w} |tr(P rho) tr(P psi)|,
   |bias| <= sum_w m_w T_w where T_w <= 2^-n C(n, w) 3^w (every |tr| <= 1)
   and sum_w T_w <= 1 (Cauchy-Schwarz as above); the largest such sum is
   found greedily (:func:`weight_bias_bound`). A fit whose worst residuals
   sit on few-body supports (there are few of them) is thus not charged
   for them.

3. Snapshots. With G the Pauli-diagonal superoperator G(P) = g(supp P) P,
   f_i = <psi| G(sigma_i) |psi>, sigma_i = |phi_i><phi_i|, phi_i = U^dag|b>.
   Per qubit G_q(X) = g1 X + (g0 - g1) tr(X) I/2 with the bond matrices g0,
   g1 of g. Shots of one setting share U: phi_b = P_b U^dag|0> with the
   Pauli string P_b = U^dag X^b U, so the MPS of U^dag|0> (bond chi_phi) is
   built once per setting, and per shot only P_b (XOR of the propagated
   U^dag X_j U) flips and signs its physical index. Every snapshot is one
   left-to-right sweep of <psi| G(|phi><phi|) |psi> with environments
   (chi^2 D chi_phi^2 numbers, chi the target's bond), batched over the
   snapshots whose phi has the same bonds at that qubit. Cost per snapshot
   O(n D chi_phi^2 chi^3); at depth 3 the mean chi_phi^2 is about 5.6. A real
   target keeps the (Hermitian) environments real, Re E + Im E; chunks of
   snapshots run on the spare cores, in single precision where its rounding
   is negligible (docs/design.md section 4.5 has the costs and their floor).

Gates must act on neighbouring qubits (chain couplings, brickwork).
"""

from __future__ import annotations

import hashlib
import itertools
import weakref
from dataclasses import dataclass

import numpy as np
from scipy.linalg import cho_factor, cho_solve
from scipy.special import gammaln

from manybody.errors import InputError
from manybody.measure.clifford import clifford_table
from manybody.measure.eigenvalues import FINAL_WEIGHT, GATE_TRANSITION
from manybody.measure.propagation import pull_back_layers
from manybody.simulation.sampling import mps_site_tensors
from manybody.simulation.statevector import BASIS_ROTATIONS
from manybody.threads import ordered_map_one_blas, spare_workers

#: singular values below this fraction of the largest are dropped (exact MPS up to rounding).
EXACT_CUTOFF = 1e-13
#: the maximum residual is checked on all 2^n patterns up to this many qubits, sampled beyond.
EXHAUSTIVE_QUBITS = 16
#: random patterns drawn when the residual cannot be checked exhaustively.
SAMPLED_PATTERNS = 1 << 16
#: snapshots per chunk are limited so that a chunk's environments stay near this size (the L3 cache)
CHUNK_BYTES = 1 << 25
#: snapshots per chunk at most (small targets: the per-chunk work in Python stays small beside the products)
MAX_CHUNK = 256
#: chi_phi assumed for that limit (chi_phi^2 = 16, against a mean of about 5.6 at depth 3: generous)
TYPICAL_PHI_BOND = 4
#: ridge on the unit diagonal of the scaled normal equations of the fit.
RIDGE = 1e-12

_INVERSES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
#: per ensemble, the choices made once per estimate: sweep precisions and fitted routes
_CHOICES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


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


def fit_inverse(lam, bond: int, weight: float = 0.3, sweeps: int = 6) -> list[np.ndarray]:
    """g(s) ~ 1/lambda(s) as an MPS of bond ``bond``: two-site ALS on sum_s w(s) (lambda g - 1)^2.

    ``lam`` from :func:`eigenvalue_mps`; w(s) = prod_q (1 - weight, weight)[s_q]
    (weight 1/2: every support pattern alike; the default 0.3 leans towards
    lighter supports, where a fit of uniform weight leaves its largest
    residuals among the weights that the bias bound charges: at 40 qubits,
    depth 3, bond 6 or 8 the bound is 1.5 to 2 times smaller; measured at
    16 to 64 qubits). The start is the product
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


def weighted_rms_residual(lam, g, weight: float = 0.3) -> float:
    """sqrt(sum_s w(s) (lambda(s) g(s) - 1)^2) (sum_s w(s) = 1), without cancellation.

    r_w(s) = sqrt(w(s)) (lambda(s) g(s) - 1) is an MPS: per site the block sum
    of sqrt(w) lambda (x) g and sqrt(w) (times -1 on the first site), bond
    D_lambda D + 1. Its norm
    comes from a left-to-right QR sweep (orthogonal steps), so it is accurate
    to about 1e-15 rather than to the square root of the rounding of
    <r, r> expanded as <lambda g, lambda g> - 2 <lambda g, 1> + 1.
    """
    root = np.sqrt(np.array([1.0 - weight, weight]))
    n = len(lam)
    carry = np.ones((1, 1))
    for q, (a, b) in enumerate(zip(lam, g)):
        prod = np.einsum("isj,ksl->iksjl", a, b).reshape(a.shape[0] * b.shape[0], 2, a.shape[2] * b.shape[2])
        pl, pr = prod.shape[0], prod.shape[2]
        block = np.zeros((pl + 1, 2, pr + 1))  # first and last sites: a row or a column of the block sum
        block[:pl, :, :pr] = prod
        block[pl, :, pr] = -1.0 if q == 0 else 1.0  # the constant -1, its sign on the first site
        if q == 0:
            block = block.sum(axis=0, keepdims=True)
        if q == n - 1:
            block = block.sum(axis=2, keepdims=True)
        block = block * root[None, :, None]
        site = np.einsum("ij,jsk->isk", carry, block)
        _, carry = np.linalg.qr(site.reshape(-1, site.shape[2]))
    return float(np.linalg.norm(carry))


def residual_patterns(n: int, rng) -> tuple[np.ndarray, bool]:
    """Support patterns on which max |r| is checked, and whether they are all 2^n of them.

    Up to EXHAUSTIVE_QUBITS qubits: every pattern. Beyond: every pattern of
    weight <= 2 or >= n - 2 (few-body Paulis, and the nearly full supports
    where 1/lambda is largest), and for every weight in between the same
    number of uniform random patterns of that weight, SAMPLED_PATTERNS in
    all (uniform patterns would hardly visit weights far from n/2).
    """
    if n <= EXHAUSTIVE_QUBITS:
        return ((np.arange(2**n)[:, None] >> np.arange(n - 1, -1, -1)) & 1).astype(bool), True
    low = [np.zeros((1, n), dtype=bool), np.eye(n, dtype=bool)]
    pairs = np.array(list(itertools.combinations(range(n), 2)))
    two = np.zeros((len(pairs), n), dtype=bool)
    two[np.arange(len(pairs))[:, None], pairs] = True
    low.append(two)
    low = np.concatenate(low)
    middle = range(3, n - 2)
    per_weight = max(1, SAMPLED_PATTERNS // len(middle))
    ranks = rng.random((len(middle), per_weight, n)).argsort(axis=2).argsort(axis=2)
    sampled = ranks < np.array(middle)[:, None, None]  # weight w: the w qubits of lowest random rank
    return np.concatenate([low, ~low, sampled.reshape(-1, n)]), False


def weight_caps(n: int) -> np.ndarray:
    """min(1, 2^-n C(n, w) 3^w) for w = 0..n: the most 2^-n sum over Paulis of weight w of |tr(P rho) tr(P psi)|."""
    w = np.arange(n + 1)
    log = -n * np.log(2.0) + gammaln(n + 1) - gammaln(w + 1) - gammaln(n - w + 1) + w * np.log(3.0)
    return np.exp(np.minimum(log, 0.0))


def weight_bias_bound(max_by_weight, n: int) -> float:
    """max sum_w m_w T_w over 0 <= T_w <= weight_caps(n)[w], sum_w T_w <= 1 (module docstring).

    A fractional knapsack: the weights of largest m_w take their caps first.
    """
    caps, left, total = weight_caps(n), 1.0, 0.0
    for w in np.argsort(-np.asarray(max_by_weight), kind="stable"):
        take = min(caps[w], left)
        total += float(max_by_weight[w]) * take
        left -= take
        if left <= 0.0:
            break
    return total


@dataclass(frozen=True, eq=False)
class ShallowInverse:
    """A fitted inverse g ~ 1/lambda of a shallow ensemble and its residual r = lambda g - 1.

    eigenvalues, inverse : MPS tensors (l, 2, r) of lambda and g over the support bits.
    rms_residual : sqrt(sum_s w(s) r(s)^2), exact by an orthogonal sweep (to about 1e-15).
    max_residual : max |r| over the checked patterns, and max_residual_by_weight the
    same for each weight 0..n of the pattern; ``exhaustive`` says whether these
    were all 2^n patterns (then the bias bound is rigorous) or a sample (an estimate).
    """

    eigenvalues: list
    inverse: list
    bond: int
    weight: float
    rms_residual: float
    max_residual: float
    max_residual_by_weight: np.ndarray
    exhaustive: bool
    checked_patterns: int

    @property
    def bias_bound(self) -> float:
        """|E[f] - F| <= sum_w m_w T_w at its largest (module docstring), at most max_s |r(s)|."""
        return weight_bias_bound(self.max_residual_by_weight, len(self.max_residual_by_weight) - 1)


def shallow_inverse(ensemble, bond: int = 8, weight: float = 0.3, sweeps: int = 6, seed: int = 0) -> ShallowInverse:
    """The fitted inverse of ``ensemble`` (cached per ensemble and options): see :func:`fit_inverse`."""
    cache = _INVERSES.setdefault(ensemble, {})
    key = (bond, weight, sweeps, seed)
    if key not in cache:
        lam = eigenvalue_mps(ensemble)
        g = fit_inverse(lam, bond, weight, sweeps)
        n = ensemble.n_qubits
        patterns, exhaustive = residual_patterns(n, np.random.default_rng(seed))
        by_weight = np.zeros(n + 1)
        for start in range(0, len(patterns), 1 << 16):
            part = patterns[start:start + (1 << 16)]
            r = np.abs(mps_values(lam, part) * mps_values(g, part) - 1.0)
            np.maximum.at(by_weight, part.sum(axis=1), r)
        cache[key] = ShallowInverse(lam, g, bond, weight, weighted_rms_residual(lam, g, weight),
                                    float(by_weight.max()), by_weight, exhaustive, len(patterns))
    return cache[key]


# ----------------------------------------------------------------- 3. snapshots
#: one-qubit Pauli codes (0 I, 1 X, 2 Z, 3 Y) of R^dag X R for each measured basis R (X: H, Y: H S^dag, Z: I)
_PAULI_MATRICES = np.array([np.eye(2), [[0, 1], [1, 0]], [[1, 0], [0, -1]], [[0, -1j], [1j, 0]]])


def _rotated_x_codes() -> np.ndarray:
    conj = np.einsum("bji,jk,bkl->bil", BASIS_ROTATIONS.conj(), _PAULI_MATRICES[1], BASIS_ROTATIONS)
    overlap = np.abs(np.einsum("pij,bji->bp", _PAULI_MATRICES, conj))
    return np.argmax(overlap, axis=1).astype(np.uint8)


def flip_generators(ensemble, settings) -> np.ndarray:
    """Pauli codes of U^dag X_j U (signs dropped) for every setting and qubit j: (K, n, n) [setting, j, qubit].

    U = R C (gates C, then the basis rotations R), so X_j is first taken back
    through R (a table per basis) and then through the gate slots in reverse
    order, C^dag Q C from the inverse of the Clifford table's conjugation map.
    """
    n, k = ensemble.n_qubits, len(settings)
    codes = np.zeros((k, n, n), dtype=np.uint8)
    codes[:, np.arange(n), np.arange(n)] = _rotated_x_codes()[settings.basis]
    return pull_back_layers(codes, settings.gates, ensemble.gate_qubits)


def setting_states(ensemble, settings) -> list[np.ndarray]:
    """MPS of U^dag|0...0> for every setting, batched: n tensors (K, l, 2, r).

    Start from the product of R_q^dag|0> and apply the adjoint gates in
    reverse time order; each two-site block is split by a batched SVD that
    keeps the largest rank any setting of the batch needs (exact, zero-padded).
    """
    k, n = len(settings), ensemble.n_qubits
    tensors = [BASIS_ROTATIONS.conj()[settings.basis[:, q], 0, :].reshape(k, 1, 2, 1) for q in range(n)]
    unitaries = clifford_table(2).unitaries
    slots = np.asarray(ensemble.gate_qubits).tolist()
    for slot in range(len(slots) - 1, -1, -1):
        a, b = slots[slot]
        u = unitaries[settings.gates[:, slot]].conj().transpose(0, 2, 1).reshape(k, 2, 2, 2, 2)
        if a > b:
            a, b, u = b, a, u.transpose(0, 2, 1, 4, 3)
        theta = np.einsum("kisj,kjtl->kistl", tensors[a], tensors[b])
        theta = np.einsum("kpqst,kistl->kipql", u, theta)
        l, r = theta.shape[1], theta.shape[4]
        uu, ss, vh = np.linalg.svd(theta.reshape(k, 2 * l, 2 * r), full_matrices=False)
        ss = np.where(ss > EXACT_CUTOFF * ss[:, :1], ss, 0.0)
        keep = max(1, int(np.max(np.sum(ss > 0, axis=1))))
        tensors[a] = uu[:, :, :keep].reshape(k, l, 2, keep)
        tensors[b] = (ss[:, :keep, None] * vh[:, :keep]).reshape(k, keep, 2, r)
    return tensors


def compress_states(tensors) -> tuple[list[np.ndarray], np.ndarray]:
    """Right-to-left SVD sweep of batched MPS (K, l, 2, r); returns the tensors and the rank per setting and cut.

    Singular values below EXACT_CUTOFF of the largest are set to zero, so for
    setting k only the first ranks[k, q] indices of bond q (between qubits
    q - 1 and q; ranks[:, 0] = ranks[:, n] = 1) carry weight, and slicing
    there is exact.
    """
    tensors = list(tensors)
    k, n = tensors[0].shape[0], len(tensors)
    ranks = np.ones((k, n + 1), dtype=np.int64)
    for q in range(n - 1, 0, -1):
        _, l, _, r = tensors[q].shape
        uu, ss, vh = np.linalg.svd(tensors[q].reshape(k, l, 2 * r), full_matrices=False)
        ss = np.where(ss > EXACT_CUTOFF * ss[:, :1], ss, 0.0)
        ranks[:, q] = np.maximum(np.sum(ss > 0, axis=1), 1)
        keep = int(ranks[:, q].max())
        tensors[q] = vh[:, :keep].reshape(k, keep, 2, r)
        tensors[q - 1] = np.einsum("kisj,kjm->kism", tensors[q - 1], uu[:, :, :keep] * ss[:, None, :keep])
    return tensors, ranks


#: number types of the snapshot sweep (real, complex) for each precision
PRECISIONS = {"double": (np.float64, np.complex128), "single": (np.float32, np.complex64)}
#: per-qubit maps of (g bond, phi bonds) up to this many rows x columns (times the parts of a real
#: target's ket) are applied as one dense matrix: beyond, g and phi one after the other cost less
#: (measured at bond 8 for every pair of phi bonds 1, 2, 4 in single and double precision)
DENSE_MAP_ENTRIES = 1 << 9


def _hermitian_parts(m):
    """A complex map (s, R', R y) as the real one (s, R', R 2 y) that acts on (R A, R^dag A) (see _site_step)."""
    s, rows, cols = m.shape
    m = m.reshape(s, rows, cols // 2, 1, 2)
    return np.concatenate([m.real, m.imag], axis=3).reshape(s, rows, 2 * cols)


def _qubit_map(phi, g_keep, g_trace, hermitian: bool):
    """The qubit's map of (d, c, c', y) to (D, C, C', x) for each snapshot, whole or as its factors.

    Keep part: g1[d, D] phi[c, x, C] phi^*[c', y, C']; trace part:
    (g0 - g1)[d, D]/2 delta(x, y) sum_u phi[c, u, C] phi^*[c', u, C'].
    Returns ("dense", m) with m[s] of shape (D C C' x, d c c' y) when that
    matrix is small; else the phi factors keep and trace, (s, C C' x, c c' y)
    each, with the order in which the g factors (real, shared) are applied:
    "g first" when the phi bonds grow at this qubit (g acts on the smaller
    side), "phi first" when they shrink or stay. ``hermitian``: the maps are real
    and act on the two parts (R A, R^dag A) placed before y (:func:`_site_step`).
    """
    s, c, _, cr = phi.shape
    keep = np.einsum("scxC,sdyD->sCDxcdy", phi, phi.conj()).reshape(s, cr * cr * 2, c * c * 2)
    both = np.einsum("scuC,sduD->sCDcd", phi, phi.conj())
    trace = np.einsum("sCDcd,xy->sCDxcdy", both, np.eye(2, dtype=phi.real.dtype)).reshape(s, cr * cr * 2, c * c * 2)
    parts = 2 if hermitian else 1
    if hermitian:
        keep, trace = _hermitian_parts(keep), _hermitian_parts(trace)
    dl, dr = g_keep.shape
    if dl * dr * keep.shape[1] * keep.shape[2] > DENSE_MAP_ENTRIES * parts:
        return ("g first" if cr > c else "phi first"), keep, trace
    m = np.einsum("dD,sij->sDidj", g_keep, keep) + np.einsum("dD,sij->sDidj", g_trace, trace)
    return "dense", m.reshape(s, dr * keep.shape[1], dl * keep.shape[2])


def _real_matmul(g, data):
    """g @ data for a real g: a complex ``data`` (contiguous) as its real numbers, half a complex product's work."""
    if not np.iscomplexobj(data):
        return np.matmul(g, data)
    *batch, rows, cols = data.shape
    return np.matmul(g, data.view(g.dtype).reshape(*batch, rows, 2 * cols)).view(data.dtype)


def _site_step(env, kety, bra_rows, phi, g_keep, g_trace):
    """One qubit of <psi| G(|phi><phi|) |psi> for a group of snapshots of equal bonds.

    env[s, d, c, c', a', a] (snapshot; bonds of g, phi, phi^*, bra and ket)
    -> the same after the qubit. ``kety`` is the target's tensor as (y, a,
    A), ``bra_rows`` its conjugate as (A', x a'). Three steps, all matrix
    products: the ket (batched over s d c c'), the qubit's map of (d, c, c',
    y) per snapshot (:func:`_qubit_map`: one dense matrix, or g and the phi
    factors one after the other), and the bra (batched over s D C C'), which
    leaves the result in the layout it started from.

    A real target keeps the environment real: E[(c a), (c' a')] is Hermitian
    (swapping ket and bra conjugates it, g being real), so R = Re E + Im E
    holds all of it (Re E = (R + R^dag)/2 and Im E = (R - R^dag)/2, R^dag
    swapping c, c' and a, a'). The ket takes R A and R^dag A; the complex map
    m = a + ib then gives Re E' + Im E' before the bra as a (R A) + b (R^dag A),
    and the real bra keeps the encoding: three real products where the
    complex route has two complex ones (eight real).
    """
    s, d, c, c2, bra, kt = env.shape
    right, cr, dr = kety.shape[2], phi.shape[3], g_keep.shape[1]
    hermitian = not np.iscomplexobj(env)
    if hermitian:  # [s, d, c, c', part, y, a', A]: part 0 R A, part 1 R^dag A
        x = np.empty((s, d, c, c2, 2, 2, bra, right), dtype=env.dtype)
        np.matmul(env[:, :, :, :, None], kety, out=x[:, :, :, :, 0])
        np.matmul(env.transpose(0, 1, 3, 2, 5, 4)[:, :, :, :, None], kety, out=x[:, :, :, :, 1])
    else:
        x = np.matmul(env.reshape(-1, 1, bra, kt), kety)  # [s d c c', y, a', A]
    rows, cols = c * c2 * (2 if hermitian else 1) * 2, bra * right
    kind, *maps = _qubit_map(phi, g_keep, g_trace, hermitian)
    if kind == "dense":
        out = np.matmul(maps[0], x.reshape(s, d * rows, cols))  # [s, (D C C' x), (a' A)]
    elif kind == "g first":  # g on (d) into (D, keep or trace), then [keep | trace] on (part, c c' y)
        g_both = np.stack([g_keep.T, g_trace.T], axis=1).reshape(2 * dr, d)
        xg = _real_matmul(g_both, x.reshape(s, d, rows * cols)).reshape(s, dr, 2 * rows, cols)
        out = np.matmul(np.concatenate(maps, axis=2)[:, None], xg)
    else:  # [keep; trace] on (c c' y) into (part, C C' x), then g on (d, part)
        y = np.matmul(np.concatenate(maps, axis=1)[:, None], x.reshape(s, d, rows, cols))
        g_both = np.stack([g_keep, g_trace], axis=1).reshape(2 * d, dr).T
        out = _real_matmul(g_both, y.reshape(s, 2 * d, -1))
    out = np.matmul(bra_rows, out.reshape(-1, 2 * bra, right))  # [s D C C', A', A]
    return out.reshape(s, dr, cr, cr, right, right)


def _qubit_factors(kets, g, dtype, real_type) -> list[tuple]:
    """Per qubit what every snapshot's sweep uses: (kety, bra_rows, g_keep, g_trace) (see :func:`_site_step`).

    ``kets`` are the target's tensors as (left, physical, right), all complex or all real; ``g`` the fit's
    tensors; ``dtype`` that of the sweep (a real or complex type of single or double precision) and
    ``real_type`` its real counterpart, the type of the g factors (real: they act on real numbers).
    """
    out = []
    for ket, gq in zip(kets, g):
        kety = np.ascontiguousarray(ket.transpose(1, 0, 2), dtype=dtype)
        bra_rows = np.ascontiguousarray(ket.conj().transpose(2, 1, 0).reshape(ket.shape[2], -1), dtype=dtype)
        g_keep = np.ascontiguousarray(gq[:, 1, :], dtype=real_type)
        g_trace = np.ascontiguousarray(0.5 * (gq[:, 0, :] - gq[:, 1, :]), dtype=real_type)
        out.append((kety, bra_rows, g_keep, g_trace))
    return out


def _sandwich(factors, phi, ranks, which, flip_x, flip_z) -> np.ndarray:
    """<psi| G(|phi_i><phi_i|) |psi> for every snapshot i, phi_i = P_i phi_(setting of i): (S,).

    ``factors`` from :func:`_qubit_factors`; a real target (real factors)
    sweeps real environments (:func:`_site_step`). Snapshots are
    grouped, qubit by qubit, by the bonds of their phi on both sides of the
    qubit, so no work is spent on padding; within a group everything is a
    batched matrix product. P_i = X^x Z^z per qubit (its phase cancels in
    |phi><phi|) acts on phi's physical index.
    """
    count = len(which)
    snap_rank = ranks[which]
    sign = 1 - 2 * flip_z.astype(np.int8)
    start = np.ones((count, 1, 1, 1, 1, 1), dtype=factors[0][0].dtype)
    envs = {1: (np.arange(count), start)}
    for q, (kety, bra_rows, g_keep, g_trace) in enumerate(factors):
        parts: dict = {}
        for left, (rows, env) in envs.items():
            right_of = snap_rank[rows, q + 1]
            for right in np.unique(right_of):
                sel = right_of == right
                r_sel = rows[sel]
                f = phi[q][which[r_sel], :left, :, :right].copy()
                f[:, :, 1] *= sign[r_sel, q, None, None]
                f = np.where(flip_x[r_sel, q, None, None, None], f[:, :, ::-1], f)
                parts.setdefault(int(right), []).append((r_sel, _site_step(env[sel], kety, bra_rows, f,
                                                                           g_keep, g_trace)))
        envs = {r: (np.concatenate([p[0] for p in ps]), np.concatenate([p[1] for p in ps]))
                for r, ps in parts.items()}
    rows, env = envs[1]
    out = np.empty(count)
    out[rows] = env.reshape(len(rows)).real  # E is 1 x 1 and real: R = E
    return out


def shallow_fidelity_mps(inverse: ShallowInverse, target, ensemble, settings, setting_index, bits,
                         chunk: int | None = None, workers: int | None = None,
                         precision: str = "double") -> np.ndarray:
    """f_i = <psi| G(U_i^dag|b_i><b_i|U_i) |psi> for shallow snapshots and an MPS target: (N,).

    ``inverse`` from :func:`shallow_inverse` (g ~ 1/lambda, bias at most
    ``inverse.bias_bound``); ``target`` a quimb MPS or (left, right, physical)
    right-canonical tensors; ``setting_index`` (N,) positions in ``settings``;
    ``bits`` (N, n). Snapshots are taken setting by setting in chunks of
    ``chunk`` (default: as many as CHUNK_BYTES of environments hold, so that
    they stay in the processor's cache, at most MAX_CHUNK, and with several
    threads at least two chunks each): per distinct setting of a
    chunk U^dag|0> is built once, per snapshot only P_b = U^dag X^b U (XOR of
    the flip generators selected by b) and the sweep of :func:`_sandwich`.
    Chunks run on ``workers`` threads (default: the spare cores, see
    manybody.threads) with BLAS on one thread; each chunk is computed alone,
    so the values do not depend on the number of threads. ``precision``
    "single" sweeps in single-precision numbers: twice as fast, with a
    rounding error that :func:`sweep_precision` measures.
    """
    if precision not in PRECISIONS:
        raise InputError(f"precision {precision!r}: choose one of {', '.join(PRECISIONS)}")
    tensors = target if isinstance(target, (list, tuple)) else mps_site_tensors(target)
    n = ensemble.n_qubits
    if len(tensors) != n:
        raise InputError(f"the target MPS has {len(tensors)} sites but the snapshots have {n} qubits")
    _neighbour_gates(ensemble)
    real = not any(np.iscomplexobj(a) and np.any(np.asarray(a).imag) for a in tensors)
    kets = [np.asarray(a).real.astype(float).transpose(0, 2, 1) if real else
            np.asarray(a, dtype=complex).transpose(0, 2, 1) for a in tensors]
    real_type, complex_type = PRECISIONS[precision]
    factors = _qubit_factors(kets, inverse.inverse, real_type if real else complex_type, real_type)  # every chunk's
    setting_index = np.asarray(setting_index, dtype=np.int64)
    bits = np.asarray(bits, dtype=np.int64)
    order = np.argsort(setting_index, kind="stable")
    chi = max(max(a.shape[:2]) for a in tensors)
    bond = max(a.shape[0] for a in inverse.inverse)
    workers = spare_workers() if workers is None else workers
    if chunk is None:  # in cache, and with several threads at least two chunks each
        per_snapshot = np.dtype(complex_type).itemsize * 2 * TYPICAL_PHI_BOND**2 * bond * chi**2
        chunk = min(MAX_CHUNK, CHUNK_BYTES // per_snapshot)
        chunk = max(1, min(chunk, -(-len(order) // (2 * workers))) if workers > 1 else chunk)

    def one(rows):
        distinct, which = np.unique(setting_index[rows], return_inverse=True)
        sub = settings.take(distinct)
        phi, ranks = compress_states(setting_states(ensemble, sub))
        phi = [f.astype(complex_type, copy=False) for f in phi]
        gen = flip_generators(ensemble, sub)[which]  # (S, j, qubit)
        flip_x = np.einsum("sj,sjq->sq", bits[rows], (gen & 1).astype(np.int64)) & 1
        flip_z = np.einsum("sj,sjq->sq", bits[rows], (gen >> 1).astype(np.int64)) & 1
        return _sandwich(factors, phi, ranks, which, flip_x.astype(bool), flip_z)

    out = np.empty(len(setting_index))
    chunks = [order[start:start + chunk] for start in range(0, len(order), chunk)]
    clifford_table(2)  # built once here, not by every thread at its first chunk
    for rows, values in zip(chunks, ordered_map_one_blas(one, chunks, min(workers, len(chunks)))):
        out[rows] = values
    return out


#: snapshots on which the single-precision sweep is compared with the double one
ROUNDING_SNAPSHOTS = 16
#: the largest difference seen on them, times this margin, is the rounding bound (common practice, no source)
ROUNDING_MARGIN = 10.0
#: single precision is used while its rounding bound is at most this share of the fit's bias bound
ROUNDING_SHARE = 0.1


@dataclass(frozen=True)
class SweepPrecision:
    """The precision of the snapshot sweep and the bound on its rounding error per snapshot value.

    ``measured``: the largest |single - double| over ``snapshots`` random snapshots of the
    ensemble; ``rounding_bound`` is ROUNDING_MARGIN times that in single precision, 0 in double.
    """

    precision: str
    rounding_bound: float
    measured: float
    snapshots: int


def sweep_precision(inverse: ShallowInverse, target, ensemble, snapshots: int = ROUNDING_SNAPSHOTS,
                    seed: int = 0) -> SweepPrecision:
    """Single precision when its rounding is negligible beside the fit's bias, else double.

    ``snapshots`` random settings of ``ensemble`` with random outcome bits are
    swept in both precisions; their largest difference times ROUNDING_MARGIN
    bounds the rounding of a snapshot value (an estimate: a sample, like the
    residual beyond EXHAUSTIVE_QUBITS). Single precision is chosen when that
    bound is at most ROUNDING_SHARE of ``inverse.bias_bound``; double
    precision rounds at about 1e-13 of the values, far below any fit residual,
    and is counted as zero.
    """
    tensors = target if isinstance(target, (list, tuple)) else mps_site_tensors(target)
    key = (id(inverse), _digest(tensors), snapshots, seed)
    cache = _CHOICES.setdefault(ensemble, {})
    if key in cache and cache[key][0] is inverse:  # computed once per estimate, not once per part
        return cache[key][1]
    rng = np.random.default_rng(seed)
    settings = ensemble.draw(snapshots, rng)
    bits = rng.integers(0, 2, size=(snapshots, ensemble.n_qubits))
    index = np.arange(snapshots)
    single = shallow_fidelity_mps(inverse, tensors, ensemble, settings, index, bits, precision="single")
    double = shallow_fidelity_mps(inverse, tensors, ensemble, settings, index, bits, precision="double")
    measured = float(np.max(np.abs(single - double)))
    if ROUNDING_MARGIN * measured <= ROUNDING_SHARE * inverse.bias_bound:
        chosen = SweepPrecision("single", ROUNDING_MARGIN * measured, measured, snapshots)
    else:
        chosen = SweepPrecision("double", 0.0, measured, snapshots)
    cache[key] = (inverse, chosen)
    return chosen


def _digest(arrays) -> str:
    """A fingerprint of a sequence of arrays (shapes, types and values): a cache key for a target or a pilot."""
    digest = hashlib.blake2b(digest_size=16)
    for a in arrays:
        a = np.ascontiguousarray(a)
        digest.update(repr((a.shape, a.dtype.str)).encode())
        digest.update(a.tobytes())
    return digest.hexdigest()


#: bonds of the fitted inverse tried in turn, cheapest first
BONDS = (4, 6, 8, 10, 12)
#: the bond is the first whose bias bound is at most this share of the expected statistical error, so the
#: bound adds at most 0.5% to the error bar in quadrature (common practice, no source)
BIAS_SHARE = 0.1
#: bond of the pilot sweep that estimates the spread of the snapshot values
PILOT_BOND = 6


@dataclass(frozen=True)
class FittedRoute:
    """The inverse and the sweep precision chosen for an estimate, and the error that chose them."""

    inverse: ShallowInverse
    precision: SweepPrecision
    expected_error: float
    pilot_snapshots: int


def fitted_route(ensemble, target, settings, setting_index, bits, n_snapshots: int) -> FittedRoute:
    """The cheapest fitted inverse whose bias is negligible for an estimate from ``n_snapshots`` snapshots.

    The pilot snapshots (``setting_index`` into ``settings``, ``bits``; a
    few of the estimate's own) are swept with bond PILOT_BOND in single
    precision; their standard deviation over sqrt(n_snapshots) is the
    statistical error to expect (settings repeated by many shots, and rare
    large values that a small pilot misses, make the real error larger, so
    the choice errs towards accuracy). The bond is the
    first of BONDS whose bias bound is at most BIAS_SHARE of that error (the
    largest when none is); the precision follows :func:`sweep_precision`.
    Whatever is chosen, the bias and rounding bounds enter the error bar.
    Cached per ensemble, target, pilot and n_snapshots: the parts of one
    estimate choose once.
    """
    tensors = target if isinstance(target, (list, tuple)) else mps_site_tensors(target)
    setting_index = np.asarray(setting_index, dtype=np.int64)
    bits = np.asarray(bits)
    key = ("route", _digest(tensors), _digest([setting_index, bits]), int(n_snapshots))
    cache = _CHOICES.setdefault(ensemble, {})
    if key in cache:
        return cache[key]
    pilot = shallow_fidelity_mps(shallow_inverse(ensemble, bond=PILOT_BOND), tensors, ensemble, settings,
                                 setting_index, bits, precision="single")
    expected = float(np.std(pilot, ddof=1) / np.sqrt(max(n_snapshots, 1))) if len(pilot) > 1 else 0.0
    for bond in BONDS:
        inverse = shallow_inverse(ensemble, bond=bond)
        if inverse.bias_bound <= BIAS_SHARE * expected:
            break
    route = FittedRoute(inverse, sweep_precision(inverse, tensors, ensemble), expected, len(pilot))
    cache[key] = route
    return route
