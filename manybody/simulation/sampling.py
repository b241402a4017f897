"""Drawing snapshots of a state: exact Born sampling, dense and matrix-product.

Every sampler takes the ensemble, its settings and a number of shots per
setting, and returns outcome bits (K * shots, n) ordered setting by setting.
The measured basis rotation of docs/design.md section 2 (X: H; Y: S^dagger then H)
is applied before a computational-basis measurement.

- Dense: a batch of settings is held as a (B, 2^n) array; per-setting gates
  are applied to the whole batch at once (einsum over the batch axis), then
  shots are drawn by inverse-CDF search on the row probabilities.
- MPS: the state is right-canonical, so the conditional probability of the
  outcome at site q given the outcomes to its left is the squared norm of
  the left vector times the site tensor. All snapshots advance together,
  site by site, with one matrix product per basis.
"""

from __future__ import annotations

import numpy as np

from hamiltonians.pauli import product_phase
from manybody.measure.clifford import clifford_table
from manybody.measure.ensembles import Settings
from manybody.simulation.statevector import BASIS_ROTATIONS, apply_unitary

#: dense batches are kept below this many complex amplitudes.
DENSE_BATCH_AMPLITUDES = 1 << 18
#: global Cliffords up to this many qubits are applied as dense unitaries built by stim
GLOBAL_UNITARY_QUBITS = 10


def sample_rows(probs: np.ndarray, shots: int, rng) -> np.ndarray:
    """For every row of ``probs`` (B, D), ``shots`` indices drawn from it: (B, shots)."""
    b, d = probs.shape
    cdf = np.cumsum(probs, axis=1)
    cdf /= cdf[:, -1:]
    offset = np.arange(b)[:, None]
    u = rng.random((b, shots))
    flat = np.searchsorted((cdf + offset).ravel(), (u + offset).ravel(), side="right")
    return np.minimum(flat.reshape(b, shots) - offset * d, d - 1)


def index_bits(index: np.ndarray, n: int) -> np.ndarray:
    """Basis-state indices -> bits (qubit 0 = most significant)."""
    shifts = np.arange(n - 1, -1, -1, dtype=np.int64)
    return ((np.asarray(index, dtype=np.int64)[..., None] >> shifts) & 1).astype(np.uint8)


def _apply_batched(states: np.ndarray, unitaries: np.ndarray, qubits, n: int) -> np.ndarray:
    """A different k-qubit unitary per batch row, on the same qubits: (B, 2^n) -> (B, 2^n).

    The target qubits are moved next to the batch axis, so that the update
    is one batched matrix product (B, 2^k, 2^k) @ (B, 2^k, rest).
    """
    b = len(states)
    k = len(qubits)
    axes = [1 + q for q in qubits]
    t = np.moveaxis(states.reshape((b,) + (2,) * n), axes, list(range(1, 1 + k)))
    shape = t.shape
    t = np.matmul(unitaries, np.ascontiguousarray(t).reshape(b, 2**k, -1))
    t = np.moveaxis(t.reshape(shape), list(range(1, 1 + k)), axes)
    return np.ascontiguousarray(t).reshape(b, 2**n)


def rotate_dense(states, ensemble, settings: Settings, start: int):
    """U of settings start..start+B applied to a batch of copies of the state."""
    n = ensemble.n_qubits
    b = len(states)
    sel = slice(start, start + b)
    if settings.gates is not None:  # layers of two-qubit gates, batched over settings
        table = clifford_table(2)
        for slot, (qa, qb) in enumerate(ensemble.gate_qubits.tolist()):
            states = _apply_batched(states, table.unitaries[settings.gates[sel, slot]], (qa, qb), n)
    if settings.tableau_x is not None and n <= GLOBAL_UNITARY_QUBITS:  # global Cliffords as matrices
        for row in range(b):
            k = start + row
            states[row] = clifford_unitary(settings.tableau_x[k], settings.tableau_z[k],
                                           settings.tableau_sign[k]) @ states[row]
    elif settings.tableau_x is not None:  # larger global Cliffords, gate by gate
        from manybody.measure.clifford import gate_matrix

        for row in range(b):
            for name, qubits in ensemble.gates(settings, start + row):
                local = gate_matrix(name, tuple(range(len(qubits))), len(qubits))
                states[row] = apply_unitary(states[row], local, qubits)
    if settings.basis is not None:
        for q in range(n):
            states = _apply_batched(states, BASIS_ROTATIONS[settings.basis[sel, q]], (q,), n)
    return states


def clifford_unitary(tableau_x, tableau_z, tableau_sign) -> np.ndarray:
    """The 2^n x 2^n matrix of a Clifford given by its tableau, up to a global phase.

    Column x is U|x> = (U X^x U^dag) U|0>: the image of X^x is the product of
    the images of the X_q (they commute), a Pauli i^(x.z) X^a Z^c acting as
    |c'> -> i^(a.c) (-1)^(c.c') |c' ^ a>; U|0> is the stabilizer state of the
    images of the Z_q (stim). Cost O(4^n), no gate synthesis.
    """
    from manybody.measure.qasm import tableau_of

    n = tableau_x.shape[-1]
    v0 = tableau_of(tableau_x, tableau_z, tableau_sign).to_state_vector(endian="big")
    xs, zs = np.zeros((1, n), dtype=np.uint8), np.zeros((1, n), dtype=np.uint8)
    phase = np.zeros(1, dtype=np.int64)  # powers of i
    for q in range(n - 1, -1, -1):  # qubit 0 ends up as the most significant bit of the column index
        x2, z2, k = product_phase(xs, zs, tableau_x[2 * q], tableau_z[2 * q])
        xs, zs = np.concatenate([xs, x2]), np.concatenate([zs, z2])
        phase = np.concatenate([phase, phase + k + (2 if tableau_sign[2 * q] < 0 else 0)])
    weights = 1 << np.arange(n - 1, -1, -1, dtype=np.int64)
    xm, zm = xs.astype(np.int64) @ weights, zs.astype(np.int64) @ weights
    rows = np.arange(2**n, dtype=np.int64)
    source = rows[:, None] ^ xm[None, :]  # (row, column): U[r, x] = phase * v0[r ^ xm_x]
    parity = (np.bitwise_count(source & zm[None, :]) & 1).astype(np.int64)
    power = phase + np.bitwise_count(xm & zm)
    return (1j ** (power % 4))[None, :] * (1 - 2 * parity) * v0[source]


def dense_to_tensors(psi: np.ndarray) -> list[np.ndarray]:
    """Exact right-canonical MPS tensors (left, right, physical) of a dense state, by SVDs from the right."""
    n = int(np.log2(len(psi)))
    rest = np.asarray(psi, dtype=complex).reshape(-1, 1) / np.linalg.norm(psi)
    tensors = []
    for q in range(n - 1, -1, -1):
        chi_r = rest.shape[1]
        m = rest.reshape(-1, 2 * chi_r)  # (left, physical * right)
        u, s, vh = np.linalg.svd(m, full_matrices=False)
        keep = s > 1e-14 * s[0]
        u, s, vh = u[:, keep], s[keep], vh[keep]
        tensors.append(vh.reshape(-1, 2, chi_r).transpose(0, 2, 1))  # (l, r, p), right isometry
        rest = u * s
    tensors.reverse()
    tensors[0] = tensors[0] * rest.reshape(-1)[0]  # the remaining 1x1 factor is a phase
    return tensors


def sample_dense(psi: np.ndarray, ensemble, settings: Settings, shots: int, rng, progress=None) -> np.ndarray:
    """Outcome bits (K * shots, n) of a dense state, exact Born sampling.

    Local bases only: the state is turned into an exact MPS and sampled site
    by site (cheaper than rotating a copy of the state per setting). Circuit
    ensembles: the circuits are applied to batches of copies.
    """
    n = ensemble.n_qubits
    psi = np.asarray(psi, dtype=complex)
    k = len(settings)
    if ensemble.is_local:
        rows = np.repeat(settings.basis, shots, axis=0)
        return sample_mps_bases(dense_to_tensors(psi), rows, rng)
    batch = max(1, DENSE_BATCH_AMPLITUDES // len(psi))
    out = np.empty((k * shots, n), dtype=np.uint8)
    starts = range(0, k, batch)
    for start in (progress(starts) if progress else starts):
        b = min(batch, k - start)
        states = rotate_dense(np.broadcast_to(psi, (b, len(psi))).copy(), ensemble, settings, start)
        idx = sample_rows(np.abs(states) ** 2, shots, rng)
        out[start * shots:(start + b) * shots] = index_bits(idx.ravel(), n)
    return out


# ------------------------------------------------------------------- MPS
def mps_site_tensors(mps) -> list[np.ndarray]:
    """Right-canonical (left, right, physical) tensors of a quimb MPS (normalised copy)."""
    m = mps.copy()
    m.right_canonize()
    m /= m.norm()
    arrays = []
    n = m.L
    for q in range(n):
        inds = ([m.bond(q - 1, q)] if q > 0 else []) + ([m.bond(q, q + 1)] if q < n - 1 else [])
        a = np.asarray(m[q].transpose(*inds, m.site_ind(q)).data)  # gates may permute the indices
        if q == 0:
            a = a[None]
        if q == n - 1:
            a = a[:, None]
        arrays.append(a)
    return arrays


def sample_mps_bases(tensors, basis_rows: np.ndarray, rng) -> np.ndarray:
    """One snapshot per row of ``basis_rows`` (N, n) from right-canonical MPS tensors.

    The left vectors V (N, chi) of all snapshots advance together: at site q
    the candidates W[s, b] = V[s] A_q^(basis)[:, :, b] give the conditional
    probabilities |W[s, b]|^2 / |V[s]|^2 (right canonical form), the drawn
    outcome selects W[s, b_s], which is renormalised.
    """
    basis_rows = np.asarray(basis_rows)
    count, n = basis_rows.shape
    out = np.empty((count, n), dtype=np.uint8)
    v = np.ones((count, 1), dtype=complex)
    every = np.arange(count)
    for q, a in enumerate(tensors):
        chi_l, chi_r, _ = a.shape
        w = np.empty((count, 2, chi_r), dtype=complex)
        for code in range(3):
            sel = np.flatnonzero(basis_rows[:, q] == code)
            if len(sel) == 0:
                continue
            rotated = np.einsum("ij,lrj->lir", BASIS_ROTATIONS[code], a).reshape(chi_l, 2 * chi_r)
            w[sel] = (v[sel] @ rotated).reshape(-1, 2, chi_r)
        parts = w.view(np.float64)  # real and imaginary parts side by side: |W|^2 without a conjugate copy
        weight = np.einsum("sbr,sbr->sb", parts, parts)
        p1 = weight[:, 1] / weight.sum(axis=1)
        bit = (rng.random(count) < p1).astype(np.uint8)
        out[:, q] = bit
        v = w[every, bit] / np.sqrt(weight[every, bit])[:, None]  # |W[s, b_s]|^2 is the drawn weight
    return out


def _shift_center(tensors, frm: int, to: int) -> None:
    """Move the orthogonality centre of (l, r, p) tensors from site ``frm`` to site ``to`` by QR steps."""
    for q in range(frm, to):  # rightwards: A_q = Q R, R absorbed into A_(q+1)
        l, r, p = tensors[q].shape
        qm, rm = np.linalg.qr(tensors[q].transpose(0, 2, 1).reshape(l * p, r))
        tensors[q] = qm.reshape(l, p, -1).transpose(0, 2, 1)
        nxt = tensors[q + 1]
        tensors[q + 1] = (rm @ nxt.reshape(nxt.shape[0], -1)).reshape(rm.shape[0], *nxt.shape[1:])
    for q in range(frm, to, -1):  # leftwards: A_q = L Q, L absorbed into A_(q-1)
        l, r, p = tensors[q].shape
        qm, rm = np.linalg.qr(tensors[q].reshape(l, r * p).T)
        tensors[q] = qm.T.reshape(-1, r, p)
        prev = tensors[q - 1]
        moved = prev.transpose(0, 2, 1).reshape(-1, prev.shape[1]) @ rm.T  # (l p, r')
        tensors[q - 1] = moved.reshape(prev.shape[0], prev.shape[2], -1).transpose(0, 2, 1)


def _two_site_gate(tensors, a: int, u: np.ndarray, max_bond: int, cutoff: float) -> float:
    """Apply u to sites (a, a+1) with the centre at a; truncated SVD leaves the centre at a+1.

    Returns the discarded weight (sum of dropped squared singular values).
    """
    left, right = tensors[a], tensors[a + 1]
    chi_l, chi_m, _ = left.shape
    chi_r = right.shape[1]
    # theta[(p q), (l r)] = sum_m A_a[l, m, p] A_(a+1)[m, r, q], then the gate on (p q)
    theta = left.transpose(0, 2, 1).reshape(chi_l * 2, chi_m) @ right.transpose(0, 2, 1).reshape(chi_m, 2 * chi_r)
    theta = theta.reshape(chi_l, 4, chi_r).transpose(1, 0, 2).reshape(4, chi_l * chi_r)
    theta = (u @ theta).reshape(2, 2, chi_l, chi_r).transpose(2, 0, 1, 3)
    uu, ss, vh = np.linalg.svd(theta.reshape(chi_l * 2, 2 * chi_r), full_matrices=False)
    total = float(np.sum(ss**2))
    keep = min(max_bond, int(np.sum(ss > cutoff * ss[0])))
    lost = float(np.sum(ss[keep:] ** 2)) / total
    uu, ss, vh = uu[:, :keep], ss[:keep], vh[:keep]
    tensors[a] = uu.reshape(chi_l, 2, keep).transpose(0, 2, 1)
    tensors[a + 1] = (ss[:, None] * vh).reshape(keep, 2, chi_r).transpose(0, 2, 1)
    return lost


def apply_circuit_tensors(tensors, gates, max_bond: int, cutoff: float = 1e-12):
    """Apply two-qubit gates [(u, a, b)] in order to right-canonical (l, r, p) tensors.

    The orthogonality centre follows the gates (QR steps), each gate is a
    truncated two-site SVD; gates on distant qubits travel with SWAPs.
    Returns new right-canonical tensors of the normalised state and the
    total discarded weight (a bound on 1 - fidelity, to first order).
    """
    swap = np.eye(4)[[0, 2, 1, 3]]
    tensors = list(tensors)
    center, lost = 0, 0.0
    for u, a, b in gates:
        if a > b:  # keep the first gate qubit on the left: conjugate by SWAP
            a, b, u = b, a, swap @ u @ swap
        _shift_center(tensors, center, a)
        for q in range(a, b - 1):  # bring qubit a next to b
            lost += _two_site_gate(tensors, q, swap, max_bond, cutoff)
        lost += _two_site_gate(tensors, b - 1, u, max_bond, cutoff)
        center = b
        for q in range(b - 2, a - 1, -1):  # and back
            _shift_center(tensors, center, q + 1)
            lost += _two_site_gate(tensors, q, swap, max_bond, cutoff)
            center = q + 1
    _shift_center(tensors, center, 0)
    tensors[0] = tensors[0] / np.linalg.norm(tensors[0])
    return tensors, lost


def apply_setting_mps(tensors, ensemble, settings: Settings, k: int, max_bond: int, cutoff: float = 1e-12):
    """Right-canonical tensors after the gates of shallow setting k, and the discarded weight."""
    table = clifford_table(2)
    gates = [(table.unitaries[settings.gates[k, slot]], qa, qb)
             for slot, (qa, qb) in enumerate(ensemble.gate_qubits.tolist())]
    return apply_circuit_tensors(tensors, gates, max_bond, cutoff)


def sample_mps(mps, ensemble, settings: Settings, shots: int, rng, max_bond: int = 128,
               progress=None, chunk: int = 4096):
    """Outcome bits (K * shots, n) from an MPS; returns (bits, largest discarded weight).

    ``mps`` is a quimb MPS or its right-canonical site tensors (:func:`mps_site_tensors`, a list).
    """
    n = ensemble.n_qubits
    k = len(settings)
    out = np.empty((k * shots, n), dtype=np.uint8)
    if ensemble.kind == "global":
        raise ValueError("the global ensemble needs the dense backend")
    discarded = 0.0
    tensors = mps if isinstance(mps, list) else mps_site_tensors(mps)
    if ensemble.is_local:
        rows = np.repeat(settings.basis, shots, axis=0)
        starts = range(0, len(rows), chunk)
        for start in (progress(starts) if progress else starts):
            out[start:start + chunk] = sample_mps_bases(tensors, rows[start:start + chunk], rng)
        return out, discarded
    indices = range(k)
    for j in (progress(indices) if progress else indices):
        rotated, lost = apply_setting_mps(tensors, ensemble, settings, j, max_bond)
        discarded = max(discarded, lost)
        rows = np.repeat(settings.basis[j:j + 1], shots, axis=0)
        out[j * shots:(j + 1) * shots] = sample_mps_bases(rotated, rows, rng)
    return out, discarded
