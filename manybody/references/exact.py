"""Exact references: the yardsticks every estimator is tested against.

Dense state vectors (exact diagonalization with scipy, evolution with
``expm_multiply``) for small systems; matrix product states (quimb DMRG and
TEBD) for chains and ladders. Basis index convention: qubit 0 is the most
significant bit, as in ``numpy.kron`` order (DESIGN.md section 2).
"""

from __future__ import annotations

from functools import reduce

import numpy as np
import scipy.sparse.linalg as spla
from scipy.sparse.linalg import expm_multiply

from hamiltonians.pauli import _SIGMA, PauliExpansion, _popcount_rows

#: up to this many qubits the exact diagonalization path is used by default.
MAX_EXACT_QUBITS = 20


# --------------------------------------------------------------- dense states
def ground_state(ham: PauliExpansion) -> tuple[float, np.ndarray]:
    """Lowest eigenvalue and eigenvector of H (scipy eigsh; dense eigh when tiny)."""
    mat = ham.to_sparse()
    if mat.shape[0] <= 64:
        vals, vecs = np.linalg.eigh(mat.toarray())
        return float(vals[0]), vecs[:, 0]
    v0 = np.random.default_rng(0).standard_normal(mat.shape[0])
    vals, vecs = spla.eigsh(mat, k=1, which="SA", v0=v0, tol=1e-12)
    return float(vals[0]), vecs[:, 0]


def expectation(op: PauliExpansion, psi: np.ndarray) -> float | complex:
    """<psi|op|psi> for a normalised dense state."""
    val = np.vdot(psi, op.to_sparse() @ psi)
    return float(val.real) if op.is_hermitian() else complex(val)


def pauli_expectations(ops: PauliExpansion, psi: np.ndarray) -> np.ndarray:
    """<psi|P_t|psi> for every string of ``ops`` (coefficients ignored).

    P|c> = i^y (-1)^(z.c) |c ^ x>, so <psi|P|psi> = sum_r conj(psi_r) i^y (-1)^(z.(r^x)) psi_(r^x).
    """
    xm, zm = ops.integer_masks()
    ny = _popcount_rows(ops.x & ops.z)
    rows = np.arange(len(psi), dtype=np.uint64)
    out = np.empty(len(ops), dtype=complex)
    for t in range(len(ops)):
        col = rows ^ xm[t]
        sign = 1.0 - 2.0 * (np.bitwise_count(col & zm[t]) & 1)
        out[t] = (1j ** (ny[t] % 4)) * np.vdot(psi, sign * psi[col])
    return out.real if np.all(np.abs(out.imag) < 1e-12) else out


def reduced_density_matrix(psi: np.ndarray, sites) -> np.ndarray:
    """rho_A = tr_B |psi><psi| for the qubits ``sites`` (kept in the order given)."""
    n = int(np.log2(len(psi)))
    sites = list(sites)
    rest = [q for q in range(n) if q not in sites]
    m = np.transpose(psi.reshape((2,) * n), sites + rest).reshape(2 ** len(sites), -1)
    return m @ m.conj().T


def purity(rho: np.ndarray) -> float:
    """tr rho^2."""
    return float(np.real(np.einsum("ij,ji->", rho, rho)))


def renyi2(rho: np.ndarray) -> float:
    """S2 = -ln tr rho^2 in nats."""
    return -np.log(purity(rho))


def evolve(ham: PauliExpansion, psi0: np.ndarray, times) -> np.ndarray:
    """psi(t) = exp(-i H t) psi0 at each time (scipy expm_multiply, stepping from the last time)."""
    mat = ham.to_sparse(dtype=complex)
    times = np.asarray(times, dtype=float)
    out = np.empty((len(times), len(psi0)), dtype=complex)
    psi, t_prev = np.asarray(psi0, dtype=complex), 0.0
    for k, t in enumerate(times):
        if t != t_prev:
            psi = expm_multiply(-1j * (t - t_prev) * mat, psi)
        out[k], t_prev = psi, t
    return out


#: one-qubit states by letter: 0, 1 (Z basis), + and - (X basis)
SINGLE_QUBIT_STATES = {"0": np.array([1, 0], dtype=complex), "1": np.array([0, 1], dtype=complex),
                       "+": np.array([1, 1], dtype=complex) / np.sqrt(2),
                       "-": np.array([1, -1], dtype=complex) / np.sqrt(2)}


def product_state(letters: str) -> np.ndarray:
    """A product state from one letter per qubit (see SINGLE_QUBIT_STATES)."""
    return reduce(np.kron, [SINGLE_QUBIT_STATES[c] for c in letters])


# ------------------------------------------------------------ matrix products
def ground_state_mps(ham: PauliExpansion, bond_dims=(16, 32, 64, 128), cutoff: float = 1e-10,
                     tol: float = 1e-9, max_sweeps: int = 20):
    """DMRG ground state (quimb DMRG2) of a Pauli sum along the qubit order: (energy, MPS).

    The starting state is a seeded random MPS, so the result is reproducible.
    """
    import quimb.tensor as qtn

    mpo = ham.to_mpo()
    # a seeded starting state: the same Hamiltonian always gives the same MPS
    start = qtn.MPS_rand_state(ham.n_qubits, bond_dim=min(8, list(bond_dims)[0]), seed=0, dtype=mpo.dtype)
    dmrg = qtn.DMRG2(mpo, bond_dims=list(bond_dims), cutoffs=cutoff, p0=start)
    dmrg.solve(tol=tol, max_sweeps=max_sweeps, verbosity=0)
    return float(np.real(dmrg.energy)), dmrg.state


def mps_reduced_density_matrix(mps, sites) -> np.ndarray:
    """Dense rho_A of an MPS for the qubits ``sites`` (in increasing order)."""
    sites = sorted(int(q) for q in sites)
    rho = mps.partial_trace(sites, get="matrix")
    return np.asarray(rho)


def mps_half_purity(mps, cut: int) -> float:
    """tr rho_A^2 for A = qubits 0..cut-1 of an MPS, from the Schmidt values at that bond."""
    p = np.asarray(mps.schmidt_values(cut), dtype=float)
    p = p / p.sum()
    return float(np.sum(p**2))


def local_ham_1d(ham: PauliExpansion):
    """quimb LocalHam1D of a Pauli sum with only one- and nearest-neighbour two-qubit terms."""
    import quimb.tensor as qtn

    op = ham.combined()
    sup = op.support
    strings = op.strings()
    h1: dict[int, np.ndarray] = {}
    h2: dict[tuple[int, int], np.ndarray] = {}
    for t, s in enumerate(strings):
        qs = np.flatnonzero(sup[t])
        c = op.coeffs[t]
        if len(qs) == 0:
            continue  # a constant shifts only the global phase
        if len(qs) == 1:
            q = int(qs[0])
            h1[q] = h1.get(q, 0) + c * _SIGMA[s[q]]
        elif len(qs) == 2 and qs[1] == qs[0] + 1:
            q = int(qs[0])
            h2[(q, q + 1)] = h2.get((q, q + 1), 0) + c * np.kron(_SIGMA[s[q]], _SIGMA[s[q + 1]])
        else:
            raise ValueError(f"term {s} is not a nearest-neighbour term along the qubit order; "
                             "TEBD needs a chain Hamiltonian")
    return qtn.LocalHam1D(ham.n_qubits, H2=h2, H1=h1)


def evolve_mps(ham: PauliExpansion, mps0, times, dt: float = 0.05, bond_dim: int = 128,
               cutoff: float = 1e-12):
    """MPS at each time under exp(-i H t) by fourth-order TEBD (quimb).

    Returns (states, Trotter error estimate). Small ``dt`` is not better:
    truncation errors add up per step, so keep ``cutoff`` well below the
    accuracy wanted.
    """
    import quimb.tensor as qtn

    tebd = qtn.TEBD(mps0.copy(), local_ham_1d(ham), dt=dt, progbar=False,
                    split_opts={"cutoff": cutoff, "max_bond": bond_dim})
    states = []
    for t in np.asarray(times, dtype=float):
        if t > tebd.t:
            tebd.update_to(float(t), dt=dt, order=4)
        states.append(tebd.pt.copy())
    return states, float(tebd.err)
