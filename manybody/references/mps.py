"""Matrix-product references: the results dataset of a quimb MPS along the qubit order.

The state is brought to right-canonical form, psi = B_0 B_1 ... B_(n-1) with
sum_s B_q[s] B_q[s]^+ = 1 for q > 0 (Schollwoeck, Ann. Phys. 326, 96 (2011),
section 4.4). Then the part of the chain right of any bond contributes the
identity, and the left part the environment

    rho_0 = 1,   rho_(q+1) = sum_s B_q[s]^+ rho_q B_q[s],

the density matrix of the left block in the orthonormal basis of the right
one. Every quantity below is a short transfer-matrix sweep started from
rho_q and closed with the identity:

- one- and two-site Pauli expectations of all pairs: one sweep that carries
  the 3q open environments of all sites left of the current one, O(n^2 chi^3);
- Hamiltonian terms of weight <= 2 by look-up in those tables, longer strings
  by their own sweep;
- the energy variance ||(H - E) psi||^2 from the MPO of H - E, O(n chi^3 D^2);
- purities of contiguous blocks: tr rho_q^2 for blocks touching an end of the
  chain, otherwise from the block's Schmidt decomposition when small enough.

Site tensors are arrays B[left, physical, right], physical index 0 = |0>.
"""

from __future__ import annotations

import warnings

import numpy as np

from hamiltonians.pauli import PauliExpansion
from manybody.references.exact import PAULI_MATRICES

#: Pauli code (I 0, X 1, Z 2, Y 3; manybody.measure.paulis) -> index into PAULI_MATRICES (X, Y, Z)
AXIS_OF_CODE = np.array([-1, 0, 2, 1])
#: largest block tensor (elements) and Gram cost (multiply-adds) for a purity of a block inside the chain
MAX_BLOCK_ELEMENTS = 1 << 24
MAX_BLOCK_COST = 1 << 33


def site_tensors(mps) -> list[np.ndarray]:
    """Right-canonical, normalised site tensors B_q[left, physical, right] of a quimb MPS (which is left alone)."""
    psi = mps.copy()
    psi.right_canonize()
    n = psi.L
    out = []
    for q in range(n):
        inds = ([psi.bond(q - 1, q)] if q > 0 else []) + [psi.site_ind(q)] + ([psi.bond(q, q + 1)] if q < n - 1 else [])
        b = np.asarray(psi[q].transpose(*inds).data, dtype=complex)
        out.append(b.reshape((1,) * (q == 0) + b.shape + (1,) * (q == n - 1)))
    out[0] = out[0] / np.linalg.norm(out[0])
    return out


def transfer(env: np.ndarray, b: np.ndarray, op: np.ndarray | None = None) -> np.ndarray:
    """E'[c', c] = sum conj(B[a', s', c']) E[a', a] O[s', s] B[a, s, c] for a stack E (..., a', a); O = 1 if None."""
    if op is None:  # two matrix products: (E B)[.., (a' s), c], then B^+ over (a' s)
        a, d, c = b.shape
        ket = (env.reshape(-1, a) @ b.reshape(a, d * c)).reshape(env.shape[:-2] + (a * d, c))
        return b.reshape(a * d, c).conj().T @ ket
    return sum(op[t, s] * (b[:, t].conj().T @ env @ b[:, s])
               for t in range(b.shape[1]) for s in range(b.shape[1]) if op[t, s] != 0)


def left_environments(tensors) -> list[np.ndarray]:
    """rho_q for q = 0..n (rho_n = <psi|psi> = 1)."""
    envs = [np.ones((1, 1), dtype=complex)]
    for b in tensors:
        envs.append(transfer(envs[-1], b))
    return envs


def pauli_moments(tensors, envs) -> tuple[np.ndarray, np.ndarray]:
    """<sigma^a_q> (3, n) and <sigma^a_q sigma^b_r> (3, 3, n, n; NaN where q = r) in one sweep.

    At site r the stack holds E^a_q (q < r) = environments opened by sigma^a
    at q and carried to r by identity transfers; closing with
    R^b_r[a, a'] = sum_(s,s',c) B_r[a,s,c] sigma^b[s',s] conj(B_r[a',s',c])
    gives all <sigma^a_q sigma^b_r> at once.
    """
    n = len(tensors)
    mag = np.empty((3, n))
    corr = np.full((3, 3, n, n), np.nan)
    stack = None
    for r, b in enumerate(tensors):
        close = np.einsum("asc,kts,ptc->kap", b, PAULI_MATRICES, b.conj())
        mag[:, r] = np.einsum("pa,kap->k", envs[r], close).real
        if r:
            vals = np.einsum("mpa,kap->mk", stack, close).real.reshape(r, 3, 3)
            corr[:, :, :r, r] = vals.transpose(1, 2, 0)
            corr[:, :, r, :r] = vals.transpose(2, 1, 0)
            stack = transfer(stack, b)
        opened = np.stack([transfer(envs[r], b, PAULI_MATRICES[k]) for k in range(3)])
        stack = opened if stack is None else np.concatenate([stack, opened])
    return mag, corr


def string_expectation(tensors, envs, codes: np.ndarray) -> float:
    """<P> of one Pauli string (codes I 0, X 1, Z 2, Y 3 per qubit), swept over its support only."""
    support = np.flatnonzero(codes)
    if len(support) == 0:
        return 1.0
    env = envs[support[0]]
    for q in range(support[0], support[-1] + 1):
        env = transfer(env, tensors[q], None if codes[q] == 0 else PAULI_MATRICES[AXIS_OF_CODE[codes[q]]])
    return float(np.trace(env).real)


def term_expectations(tensors, envs, codes: np.ndarray, mag: np.ndarray, corr: np.ndarray) -> np.ndarray:
    """<P_t> for every row of ``codes`` (T, n): weights 0-2 by look-up in mag and corr, longer strings swept."""
    weight = np.count_nonzero(codes, axis=1)
    out = np.ones(len(codes))
    one = np.flatnonzero(weight == 1)
    if len(one):
        q = np.argmax(codes[one] != 0, axis=1)
        out[one] = mag[AXIS_OF_CODE[codes[one, q]], q]
    two = np.flatnonzero(weight == 2)
    if len(two):
        qa = np.argmax(codes[two] != 0, axis=1)
        qb = codes.shape[1] - 1 - np.argmax(codes[two][:, ::-1] != 0, axis=1)
        out[two] = corr[AXIS_OF_CODE[codes[two, qa]], AXIS_OF_CODE[codes[two, qb]], qa, qb]
    for t in np.flatnonzero(weight > 2):
        out[t] = string_expectation(tensors, envs, codes[t])
    return out


def mpo_tensors(op: PauliExpansion) -> list[np.ndarray]:
    """MPO site tensors W[left, right, out, in] of a Pauli sum (quimb, exact construction)."""
    mpo = op.to_mpo()
    n = op.n_qubits
    out = []
    for q in range(n):
        inds = (([mpo.bond(q - 1, q)] if q > 0 else []) + ([mpo.bond(q, q + 1)] if q < n - 1 else [])
                + [mpo.upper_ind(q), mpo.lower_ind(q)])
        w = np.asarray(mpo[q].transpose(*inds).data, dtype=complex)
        out.append(w[None] if q == 0 else (w[:, None] if q == n - 1 else w))
    return out


def norm_after_mpo(tensors, mpo) -> float:
    """||W psi||^2 by a left-to-right sweep of <psi|W^+ W|psi> with environments F[a', w', w, a]."""
    env = np.ones((1, 1, 1, 1), dtype=complex)
    for b, w in zip(tensors, mpo):
        env = np.einsum("pxya,asc->pxysc", env, b, optimize=True)
        env = np.einsum("pxysc,yvts->pxvtc", env, w, optimize=True)
        env = np.einsum("pxvtc,xutr->purvc", env, w.conj(), optimize=True)
        env = np.einsum("purvc,prd->duvc", env, b.conj(), optimize=True)
    return float(env.real.ravel()[0])


def energy_variance(tensors, ham: PauliExpansion, energy: float) -> float:
    """<H^2> - <H>^2 = ||(H - E) psi||^2 with the MPO of H - E (no cancellation of two large numbers)."""
    shifted = ham.combined() + PauliExpansion.identity(ham.n_qubits, -energy)
    return norm_after_mpo(tensors, mpo_tensors(shifted.combined(atol=1e-14)))


def block_purity(tensors, envs, first: int, last: int) -> float:
    """tr rho_A^2 of the contiguous block A = first..last (qubits).

    A block touching an end of the chain has the purity of the bond
    environment, tr rho^2. Otherwise rho_first = U diag(l) U^+ gives
    orthonormal left states, psi = sum_k sqrt(l_k) |k> (x) Theta_k with
    Theta = sqrt(l) U^+ B_first ... B_last (k, 2^|A|, c), and tr rho_A^2 is
    the squared Frobenius norm of the smaller Gram matrix of Theta. NaN with
    a warning when that is too large.
    """
    n = len(tensors)
    if first == 0 or last == n - 1:
        rho = envs[last + 1] if first == 0 else envs[first]
        return float(np.sum(np.abs(rho) ** 2))
    vals, vecs = np.linalg.eigh(envs[first])
    keep = vals > 1e-15 * vals.max()
    theta = (np.sqrt(vals[keep])[:, None] * vecs[:, keep].conj().T)[:, None, :]  # (k, 2^|A| so far, bond)
    k = theta.shape[0]
    for q in range(first, last + 1):
        b = tensors[q]
        phys = theta.shape[1] * b.shape[1]
        if k * phys * b.shape[2] > MAX_BLOCK_ELEMENTS:
            return _too_large(first, last)
        theta = (theta.reshape(-1, b.shape[0]) @ b.reshape(b.shape[0], -1)).reshape(k, phys, b.shape[2])
    m = theta.transpose(1, 0, 2).reshape(theta.shape[1], -1)
    if m.size * min(m.shape) > MAX_BLOCK_COST:
        return _too_large(first, last)
    gram = m @ m.conj().T if m.shape[0] <= m.shape[1] else m.conj().T @ m
    return float(np.sum(np.abs(gram) ** 2))


def _too_large(first, last) -> float:
    warnings.warn(f"the purity of qubits {first}-{last} needs too large a tensor at this bond dimension; "
                  "reported as NaN", stacklevel=3)
    return float("nan")


def subsystem_purity(tensors, envs, qubits) -> float:
    """tr rho_A^2 for qubits contiguous in the qubit order; NaN with a warning otherwise."""
    qubits = np.sort(np.asarray(qubits, dtype=int))
    if len(qubits) == 0:
        return 1.0
    if np.any(np.diff(qubits) != 1):
        warnings.warn(f"qubits {qubits.tolist()} are not contiguous in the qubit order; the matrix-product "
                      "reference gives purities of contiguous blocks only (NaN here)", stacklevel=2)
        return float("nan")
    return block_purity(tensors, envs, int(qubits[0]), int(qubits[-1]))


def mps_dataset(model, mps, subsystems=(), attrs: dict | None = None):
    """The reference dataset (same schema as the dense one) of a quimb MPS over the model's qubits."""
    from manybody.references.dataset import assemble, subsystem_qubits
    from manybody.schema import term_table

    tensors = site_tensors(mps)
    envs = left_environments(tensors)
    mag, corr = pauli_moments(tensors, envs)
    codes, coeffs, _ = term_table(model.hamiltonian, model.qubit_site, model.n_sites)
    values = term_expectations(tensors, envs, codes, mag, corr)
    variance = energy_variance(tensors, model.hamiltonian, float(values @ coeffs))
    purities = [subsystem_purity(tensors, envs, subsystem_qubits(model, s)) for s in subsystems]
    return assemble(model, values, variance, mag, corr, purities, subsystems, attrs)
