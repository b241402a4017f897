"""Exact references: the yardsticks every estimator is tested against.

Dense state vectors (exact diagonalization with scipy, evolution with
``expm_multiply``) for small systems; matrix product states (quimb DMRG and
TEBD) for chains and ladders. Basis index convention: qubit 0 is the most
significant bit, as in ``numpy.kron`` order (docs/design.md section 2).
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
def ground_state(ham: PauliExpansion, sector: tuple[int, int] | None = None) -> tuple[float, np.ndarray]:
    """Lowest eigenvalue and eigenvector of H (scipy eigsh; dense eigh when small).

    ``sector`` (spin up, spin down): the lowest state with that many particles,
    for fermions mapped by Jordan-Wigner with qubit 2i = site i spin up and
    2i+1 = spin down, occupied = |1> (openfermion's convention); H conserves
    both numbers, so it is diagonalized in the basis states of the sector.
    """
    mat = ham.to_sparse()
    index = sector_states(ham.n_qubits, sector)
    if index is not None:
        mat = mat[index][:, index]
    if mat.shape[0] <= 64:
        vals, vecs = np.linalg.eigh(mat.toarray())
        energy, vec = float(vals[0]), vecs[:, 0]
    else:
        v0 = np.random.default_rng(0).standard_normal(mat.shape[0])
        vals, vecs = spla.eigsh(mat, k=1, which="SA", v0=v0, tol=1e-12)
        energy, vec = float(vals[0]), vecs[:, 0]
    if index is None:
        return energy, vec
    full = np.zeros(2**ham.n_qubits, dtype=vec.dtype)
    full[index] = vec
    return energy, full


def sector_states(n_qubits: int, sector) -> np.ndarray | None:
    """Basis-state indices with (spin up, spin down) occupied orbitals (qubit 0 most significant), or None."""
    if sector is None:
        return None
    rows = np.arange(2**n_qubits, dtype=np.int64)
    up = sum(1 << (n_qubits - 1 - q) for q in range(0, n_qubits, 2))
    down = sum(1 << (n_qubits - 1 - q) for q in range(1, n_qubits, 2))
    keep = (np.bitwise_count(rows & up) == sector[0]) & (np.bitwise_count(rows & down) == sector[1])
    return np.flatnonzero(keep)


def expectation(op: PauliExpansion, psi: np.ndarray) -> float | complex:
    """<psi|op|psi> for a normalised dense state."""
    val = np.vdot(psi, op.to_sparse() @ psi)
    return float(val.real) if op.is_hermitian() else complex(val)


def pauli_expectations(ops: PauliExpansion, psi: np.ndarray) -> np.ndarray:
    """<psi|P_t|psi> for every string of ``ops`` (coefficients ignored).

    P|c> = i^y (-1)^(z.c) |c ^ x>, so <psi|P|psi> = i^y sum_r w_r (-1)^(z.(r^x)) with
    w_r = conj(psi_r) psi_(r^x): one gather per distinct flip mask x, one parity per string.
    """
    xm, zm = ops.integer_masks()
    phase = 1j ** (_popcount_rows(ops.x & ops.z) % 4)
    rows = np.arange(len(psi), dtype=np.uint64)
    out = np.empty(len(ops), dtype=complex)
    flips, group = np.unique(xm, return_inverse=True)
    for g, x in enumerate(flips):
        cols = rows ^ x
        w = np.conj(psi) * psi[cols]
        total = w.sum()
        for t in np.flatnonzero(group == g):
            odd = (np.bitwise_count(cols & zm[t]) & np.uint8(1)).view(bool)
            out[t] = phase[t] * (total - 2 * np.sum(w, where=odd))
    return out.real if np.all(np.abs(out.imag) < 1e-12) else out


def apply_pauli_sum(ops: PauliExpansion, psi: np.ndarray) -> np.ndarray:
    """H psi without building a matrix, one gather per distinct flip mask x.

    (P_t psi)_r = i^(y_t) (-1)^(z_t.(r^x_t)) psi_(r^x_t), so the strings that
    share x act as one diagonal d_x(r) = sum_t c_t i^(y_t) (-1)^(z_t.(r^x))
    times the permuted vector psi_(r^x).
    """
    op = ops.combined()
    xm, zm = op.integer_masks()
    phased = op.coeffs * (1j ** (_popcount_rows(op.x & op.z) % 4))
    rows = np.arange(len(psi), dtype=np.uint64)
    out = np.zeros(len(psi), dtype=complex)
    flips, group = np.unique(xm, return_inverse=True)
    for g, x in enumerate(flips):
        cols = rows ^ x
        diag = np.zeros(len(psi), dtype=complex)
        for t in np.flatnonzero(group == g):
            diag += phased[t] * (1.0 - 2.0 * (np.bitwise_count(cols & zm[t]) & 1))
        out += diag * psi[cols]
    return out


def energy_variance(ham: PauliExpansion, psi: np.ndarray) -> float:
    """<H^2> - <H>^2 = ||(H - E) psi||^2 with E = <psi|H|psi> (one application of H; never negative)."""
    h_psi = apply_pauli_sum(ham, psi)
    energy = np.vdot(psi, h_psi).real
    return float(np.linalg.norm(h_psi - energy * psi) ** 2)


#: sigma^x, sigma^y, sigma^z stacked (axis, row, column)
PAULI_MATRICES = np.array([_SIGMA["X"], _SIGMA["Y"], _SIGMA["Z"]])


def pauli_images(psi: np.ndarray, qubits) -> np.ndarray:
    """sigma^a_q psi for a = X, Y, Z and the given qubits, as a real view (3 |qubits|, 2 * 2^n).

    X flips qubit q, Z signs it, Y = -i Z X; in the real view (re, im
    interleaved) Re<a|b> is a plain dot product.
    """
    qubits = list(qubits)
    phi = np.empty((3, len(qubits), len(psi)), dtype=complex)
    sign = np.array([1.0, -1.0])[None, :, None]
    for k, q in enumerate(qubits):  # qubit q is axis 1 of the block
        block = psi.reshape(2**q, 2, -1)
        phi[0, k] = block[:, ::-1].ravel()
        phi[1, k] = (-1j * sign * block[:, ::-1]).ravel()
        phi[2, k] = (sign * block).ravel()
    return phi.reshape(3 * len(qubits), -1).view(float)


def local_pauli_moments(psi: np.ndarray, max_bytes: int = 1 << 29) -> tuple[np.ndarray, np.ndarray]:
    """<sigma^a_q> (3, n) and <sigma^a_q sigma^b_r> (3, 3, n, n; NaN where q = r) of a dense state.

    With phi_(a,q) = sigma^a_q psi, <sigma^a_q sigma^b_r> = <phi_(a,q)|phi_(b,r)>
    for q != r (the two Paulis commute and are Hermitian): every two-point
    function is an entry of the Gram matrix of the 3n vectors phi, built by
    matrix products over blocks of qubits whose images fit in ``max_bytes``.
    """
    psi = np.asarray(psi, dtype=complex)
    n = int(np.log2(len(psi)))
    size = max(1, int(max_bytes // (3 * 16 * len(psi))))
    blocks = [np.arange(s, min(n, s + size)) for s in range(0, n, size)]
    mag = np.empty((3, n))
    corr = np.empty((3, 3, n, n))
    for i, qa in enumerate(blocks):
        fa = pauli_images(psi, qa)
        mag[:, qa] = (fa @ psi.view(float)).reshape(3, len(qa))
        for qb in blocks[i:]:
            fb = fa if qb is qa else pauli_images(psi, qb)
            gram = (fa @ fb.T).reshape(3, len(qa), 3, len(qb)).transpose(0, 2, 1, 3)
            corr[:, :, qa[:, None], qb[None, :]] = gram
            corr[:, :, qb[:, None], qa[None, :]] = gram.transpose(1, 0, 3, 2)
    corr[:, :, np.arange(n), np.arange(n)] = np.nan
    return mag, corr


def subsystem_purity(psi: np.ndarray, sites) -> float:
    """tr rho_A^2 from psi reshaped to a (2^|A|, 2^(n-|A|)) matrix M: tr (M M^+)^2 = tr (M^+ M)^2.

    The smaller of the two Gram matrices is formed (reshape and transpose only).
    """
    n = int(np.log2(len(psi)))
    sites = [int(q) for q in sites]
    rest = [q for q in range(n) if q not in sites]
    m = np.transpose(np.asarray(psi).reshape((2,) * n), sites + rest).reshape(2 ** len(sites), -1)
    gram = m @ m.conj().T if m.shape[0] <= m.shape[1] else m.conj().T @ m
    return float(np.sum(np.abs(gram) ** 2))


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
    return _local_ham_class()(ham.n_qubits, H2=h2, H1=h1)


def hermitian_expm(h: np.ndarray, x: complex) -> np.ndarray:
    """exp(x h) of a Hermitian h from its eigendecomposition h = V diag(w) V^+.

    Small gates are exponentiated this way rather than by scipy's Pade
    routine, whose BLAS threads cost milliseconds per 4 x 4 matrix on a busy machine.
    """
    w, v = np.linalg.eigh(h)
    return (v * np.exp(x * w)) @ v.conj().T


def _local_ham_class():
    """quimb's LocalHam1D with gates exponentiated by :func:`hermitian_expm` (same cache)."""
    import quimb.tensor as qtn

    class HermitianLocalHam1D(qtn.LocalHam1D):
        def _expm_cached(self, G, x):
            cache = self._op_cache["expm"]
            key = (id(G), x)
            if key not in cache:
                g = np.asarray(G)
                d = int(round(np.sqrt(g.size)))
                cache[key] = hermitian_expm(g.reshape(d, d), x).reshape(g.shape)
            return cache[key]

    return HermitianLocalHam1D


def evolve_mps(ham: PauliExpansion, mps0, times, dt: float = 0.05, bond_dim: int = 128,
               cutoff: float = 1e-12):
    """MPS at each time under exp(-i H t) by fourth-order TEBD (quimb).

    Nearest-neighbour chains use quimb's TEBD; two-qubit terms at longer
    range go through :func:`manybody.references.tebd.evolve_mps_gates`.
    Truncated states are not renormalised: 1 - <psi|psi> is the discarded
    weight. Returns (states, Trotter error estimate). Small ``dt`` is not better:
    truncation errors add up per step, so keep ``cutoff`` well below the
    accuracy wanted.
    """
    import quimb.tensor as qtn

    try:
        local = local_ham_1d(ham)
    except ValueError:  # couplings beyond nearest neighbours (ladders, strips): swap gates
        from manybody.references.tebd import evolve_mps_gates

        return evolve_mps_gates(ham, mps0, times, dt=dt, bond_dim=bond_dim, cutoff=cutoff)
    tebd = qtn.TEBD(mps0.copy(), local, dt=dt, progbar=False,
                    split_opts={"cutoff": cutoff, "max_bond": bond_dim})
    states = []
    for t in np.asarray(times, dtype=float):
        if t > tebd.t:
            tebd.update_to(float(t), dt=dt, order=4)
        states.append(tebd.pt.copy())
    return states, float(tebd.err)
