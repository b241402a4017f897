"""Purities of large subsystems from Clifford snapshots, through their stabilizer groups.

A snapshot of a Clifford ensemble is the stabilizer state rho = U^dagger|b><b|U
(docs/design.md section 3). tr(P rho) = <b|U P U^dagger|b> is nonzero only for
the Paulis P with U P U^dagger = s_P Z_(m_P), i.e. the stabilizer group of
U^dagger|b>. Those supported in a subsystem A form a group G_A(U) that depends
on the setting U alone, with k <= |A| independent generators g; the outcome b
fixes only the signs, linearly:

    tr(P_e rho) = s_e (-1)^(e . beta(b)),   beta_g(b) = m_g . b (mod 2),

for the element P_e = prod_{g in e} g (e a k-bit word). So all shots of one
setting enter through the histogram h of their generator bits beta, and the
per-setting sums of the Pauli-vector form of docs/design.md section 4,

    V_s(P_e) = sum_(shots of s) tr(P_e rho_i) / lambda_(P_e) = s_e W(e) / lambda_(P_e),
    W(e) = sum_beta h(beta) (-1)^(e . beta)   (Walsh-Hadamard transform),

cost k 2^k per setting, whatever the number of shots. The unbiased purity

    tr rho_A^2 ~ 2^-|A| (|V|^2 - sum_s |V_s|^2) / (N^2 - sum_s n_s^2),   V = sum_s V_s,

leaves out pairs of snapshots from the same setting; with one shot per setting
sum_s |V_s|^2 = sum_i |v_i|^2 = sum_i sum_(P in G_A) lambda_P^-2, since
|tr(P rho_i)| = 1 on the group. Every subsystem B of A follows from the same
sums: the Paulis of A supported in B are those of B, so all sums are also kept
per support pattern and added over the subsets of B.

Generators: the images U X_q U^dagger, U Z_q U^dagger (q in A) come from the
propagation tables (``Ensemble.final_paulis``) or, for global Cliffords, from
the tableau rows; a product of them is seen by the final computational-basis
measurement iff it commutes with the measured Pauli on every qubit, a linear
condition over GF(2) whose kernel is G_A (Gaussian elimination, vectorised
over settings; stabilizer formalism: Aaronson and Gottesman, Phys. Rev. A 70,
052328 (2004), from memory). Pauli codes on A: one
code per qubit of A (0 I, 1 X, 2 Z, 3 Y, :mod:`manybody.measure.paulis`); the
integer key of a Pauli on A is sum_t code_t 4^(|A|-1-t), the row of
:func:`manybody.measure.paulis.paulis_on`; its support pattern has bit t set
when qubit qubits[t] carries a non-identity.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import NamedTuple

import numpy as np

from hamiltonians.pauli import product_phase
from manybody.measure.paulis import BASIS_PAULI

#: the Pauli vector on A is a dense array of 4^|A| entries up to this many qubits, sparse beyond.
DENSE_MAX_QUBITS = 10
#: group elements handled at once (settings x 2^k), to bound memory.
ELEMENT_BATCH = 1 << 21
#: sparse Pauli sums are merged once this many (key, value) pairs wait.
SPARSE_PENDING = 1 << 23


class Subgroup(NamedTuple):
    """Generators of G_A(U) per setting, padded to |A| rows (rows >= rank are zero).

    rank (K,): k; codes (K, |A|, |A|) uint8 Pauli codes on A; masks (K, |A|, n) uint8
    outcome-bit masks m_g; signs (K, |A|) int8 s_g, so tr(g rho) = s_g (-1)^(m_g . b).
    """

    rank: np.ndarray
    codes: np.ndarray
    masks: np.ndarray
    signs: np.ndarray


@dataclass(frozen=True, eq=False)
class PauliVectorSums:
    """Partial sums over a chunk of snapshots for the purity of A and of its subsystems.

    qubits (|A|,); keys None (dense: values has 4^|A| entries, row r is Pauli key r) or
    sorted int64 keys of the Paulis on A with a nonzero sum; values: V(P) = sum_i v_i(P).
    self_by_support (2^|A|,): sum_i sum_(P in G_A(i), pattern sigma) lambda_P^-2.
    within_by_support (2^|A|,): sum_s sum_(P, pattern sigma) V_s(P)^2.
    setting_positions, shots, within_per_setting (S,): each setting seen, its shots
    n_s and |V_s|^2 over all of A. Within-setting sums are exact only when every
    setting's shots all come in one call.
    """

    qubits: np.ndarray
    keys: np.ndarray | None
    values: np.ndarray
    self_by_support: np.ndarray
    within_by_support: np.ndarray
    setting_positions: np.ndarray
    shots: np.ndarray
    within_per_setting: np.ndarray

    @property
    def n_snapshots(self) -> float:
        return float(self.shots.sum())

    @property
    def n_pairs(self) -> float:
        """Pairs of snapshots from different settings: N^2 - sum_s n_s^2."""
        return float(self.shots.sum()) ** 2 - float(np.sum(self.shots.astype(float) ** 2))


# ------------------------------------------------------------------ generators
def _generator_images(ensemble, settings, qubits):
    """U X_q U^dagger, U Z_q U^dagger for q in A: bits before the basis rotation and the seen bits.

    Returns px, pz (K, 2|A|, n) in the frame whose products carry the signs,
    signs (K, 2|A|), anticommute (K, 2|A|, n): 1 where the image is not seen on
    that qubit, and seen (K, 2|A|, n): the outcome bits it multiplies. Column
    j = 2t is X on qubits[t], j = 2t + 1 is Z.
    """
    n = ensemble.n_qubits
    k = len(settings)
    if ensemble.kind == "global":
        rows = np.ravel(np.column_stack([2 * np.asarray(qubits), 2 * np.asarray(qubits) + 1]))
        px = settings.tableau_x[:, rows].astype(np.uint8)
        pz = settings.tableau_z[:, rows].astype(np.uint8)
        # measured in the computational basis: seen iff no x bit; the z bits multiply outcomes
        return px, pz, settings.tableau_sign[:, rows].astype(np.int8), px, pz
    px = np.zeros((k, 2 * len(qubits), n), dtype=np.uint8)
    pz = np.zeros_like(px)
    signs = np.ones((k, 2 * len(qubits)), dtype=np.int8)
    for t, q in enumerate(np.asarray(qubits).tolist()):
        for j, code in ((2 * t, 1), (2 * t + 1, 2)):
            codes = np.zeros(n, dtype=np.uint8)
            codes[q] = code
            final, signs[:, j] = ensemble.final_paulis(codes, settings)  # light-cone table look-ups
            px[:, j], pz[:, j] = final & 1, final >> 1
    measured = BASIS_PAULI[settings.basis][:, None, :]  # (K, 1, n)
    bx, bz = measured & 1, measured >> 1
    anticommute = (px & bz) ^ (pz & bx)
    # on the seen span {I, B} of a qubit, B is flagged by its x bit (X, Y) or its z bit (Z)
    seen = np.where(bx == 1, px, pz)
    return px, pz, signs, anticommute, seen


def _kernel_rows(matrix):
    """Kernel of each (R, m) GF(2) matrix, vectorised over the first axis.

    ``matrix`` (K, m, R) holds the columns as rows. Forward elimination of
    [matrix | 1]: rows whose left part vanishes carry kernel vectors on the
    right. Returns (zero (K, m) bool, combinations (K, m, m) uint8).
    """
    k, m, r = matrix.shape
    rows = np.concatenate([matrix, np.broadcast_to(np.eye(m, dtype=np.uint8), (k, m, m))], axis=2)
    rows = np.ascontiguousarray(rows)
    if r:
        for i in range(m - 1):
            lead = np.argmax(rows[:, i, :r], axis=1)
            has = rows[np.arange(k), i, lead]
            hit = np.take_along_axis(rows[:, i + 1:, :r], lead[:, None, None], axis=2)[..., 0] & has[:, None]
            rows[:, i + 1:] ^= hit[:, :, None] * rows[:, i:i + 1]
    return ~rows[:, :, :r].any(axis=2), rows[:, :, r:]


def subgroup_on(ensemble, settings, qubits) -> Subgroup:
    """Generators of G_A(U) = {P on A : U P U^dagger = +-Z_m} for every setting.

    Kernel of the visibility map over the 2|A| single-qubit Paulis on A
    (module docstring); outcome masks are the seen bits of the combination;
    signs come from the ordered product P = i^y prod_q X_q^x_q Z_q^z_q of the
    propagated images (phases by :func:`hamiltonians.pauli.product_phase`).
    Local ensemble: the generators are the measured Paulis on A.
    """
    qubits = np.asarray(qubits, dtype=np.int64)
    a = len(qubits)
    px, pz, img_sign, anticommute, seen = _generator_images(ensemble, settings, qubits)
    cols = np.flatnonzero(anticommute.any(axis=(0, 1)))
    zero, comb = _kernel_rows(anticommute[:, :, cols])
    rank = zero.sum(axis=1)
    if np.any(rank > a):
        raise AssertionError("a stabilizer subgroup on A has at most |A| generators")
    order = np.argsort(~zero, axis=1, kind="stable")[:, :a]
    comb = np.take_along_axis(comb, order[:, :, None], axis=1)
    comb &= (np.arange(a)[None, :] < rank[:, None]).astype(np.uint8)[:, :, None]  # (K, a, 2a)
    codes = comb[:, :, 0::2] + 2 * comb[:, :, 1::2]
    masks = (np.matmul(comb, seen) & 1).astype(np.uint8)
    # signs: i^y times the ordered product of the images present
    rx = np.zeros(comb.shape[:2] + (px.shape[2],), dtype=np.uint8)
    rz = np.zeros_like(rx)
    phase = np.sum(comb[:, :, 0::2] & comb[:, :, 1::2], axis=2).astype(np.int64)
    sign = np.ones(comb.shape[:2], dtype=np.int64)
    for j in range(2 * a):
        present = comb[:, :, j].astype(bool)
        if not present.any():
            continue
        nx, nz, step = product_phase(rx, rz, px[:, None, j], pz[:, None, j])
        rx = np.where(present[..., None], nx, rx)
        rz = np.where(present[..., None], nz, rz)
        phase += np.where(present, step, 0)
        sign *= np.where(present, img_sign[:, None, j], 1)
    phase %= 4
    if np.any(phase % 2):
        raise AssertionError("a product of commuting Hermitian Paulis must be Hermitian")
    signs = (sign * np.where(phase == 2, -1, 1)).astype(np.int8)
    return Subgroup(rank, codes.astype(np.uint8), masks, signs)


# ------------------------------------------------------------------ group elements
def group_elements(codes, signs):
    """All 2^k products of k commuting generators on A: codes (S, 2^k, |A|), signs (S, 2^k).

    Element e = prod_(bit j of e) g_j; with P_e' P_g = i^ph P_(e' xor g) (ph 0 or 2),
    s_e = s_e' s_g (-1)^(ph/2).
    """
    s, k, a = codes.shape
    ex = np.zeros((s, 1, a), dtype=np.uint8)
    ez = np.zeros_like(ex)
    sg = np.ones((s, 1), dtype=np.int8)
    for j in range(k):
        gx, gz = codes[:, j:j + 1] & 1, codes[:, j:j + 1] >> 1
        nx, nz, ph = product_phase(ex, ez, gx, gz)
        ex, ez = np.concatenate([ex, nx], axis=1), np.concatenate([ez, nz], axis=1)
        sg = np.concatenate([sg, (sg * signs[:, j:j + 1] * (1 - (ph & 2))).astype(np.int8)], axis=1)
    return ex + 2 * ez, sg


def pauli_keys(codes):
    """Integer key sum_t code_t 4^(|A|-1-t) and support pattern sum_t [code_t != 0] 2^t (last axis A)."""
    a = codes.shape[-1]
    c = codes.astype(np.int64)
    keys = c @ (4 ** np.arange(a - 1, -1, -1, dtype=np.int64))
    pattern = (c != 0).astype(np.int64) @ (2 ** np.arange(a, dtype=np.int64))
    return keys, pattern


def support_eigenvalues(eigenvalue, n_qubits, qubits, patterns=None):
    """lambda of each support pattern on A (all 2^|A| when ``patterns`` is None); lambda(empty) = 1.

    ``eigenvalue`` maps a support mask (n,) bool to lambda (an ensemble's or a
    calibration's ``eigenvalue``). Patterns not asked for are NaN.
    """
    qubits = np.asarray(qubits, dtype=np.int64)
    table = np.full(2 ** len(qubits), np.nan)
    table[0] = 1.0
    todo = np.arange(1, len(table)) if patterns is None else np.unique(patterns)
    for p in todo[todo > 0].tolist():
        mask = np.zeros(n_qubits, dtype=bool)
        mask[qubits[(p >> np.arange(len(qubits))) & 1 == 1]] = True
        table[p] = eigenvalue(mask)
    return table


def walsh_hadamard(h):
    """W(e) = sum_beta h(beta) (-1)^popcount(e & beta) along the last axis (length 2^k)."""
    w = np.array(h, dtype=float)
    s, size = w.shape
    t = 1
    while t < size:
        v = w.reshape(s, -1, 2, t)
        lo = v[:, :, 0, :].copy()
        v[:, :, 0, :] += v[:, :, 1, :]
        v[:, :, 1, :] = lo - v[:, :, 1, :]
        t *= 2
    return w


# ------------------------------------------------------------------ partial sums
def _generator_bits(outcomes, masks, rows_setting):
    """beta(b) as a k-bit word per snapshot: bit g = m_g . b (mod 2); masks (S, |A|, n)."""
    out = np.packbits(np.asarray(outcomes, dtype=np.uint8), axis=1, bitorder="little")
    packed = np.packbits(masks, axis=2, bitorder="little")
    parity = np.zeros((len(out), masks.shape[1]), dtype=np.int64)
    for byte in range(out.shape[1]):  # a few bytes: n / 8
        parity += np.bitwise_count(out[:, None, byte] & packed[rows_setting, :, byte])
    return (parity & 1) @ (2 ** np.arange(masks.shape[1], dtype=np.int64))


def _eigenvalue_table(eigenvalue, n_qubits, qubits):
    if callable(eigenvalue):
        return support_eigenvalues(eigenvalue, n_qubits, qubits, patterns=np.zeros(1, np.int64))
    table = np.asarray(eigenvalue, dtype=float)
    if table.shape != (2 ** len(qubits),):
        raise ValueError(f"an eigenvalue table on {len(qubits)} qubits has 2^{len(qubits)} entries")
    return table


def _batches(ranks):
    """(rank k, setting indices) batches of equal rank with at most ELEMENT_BATCH elements each."""
    for k in np.unique(ranks).tolist():
        sel = np.flatnonzero(ranks == k)
        step = max(1, ELEMENT_BATCH >> k)
        for start in range(0, len(sel), step):
            yield k, sel[start:start + step]


def pauli_vector_sums(ensemble, settings, setting_positions, outcomes, counts, qubits, eigenvalue,
                      dense_max_qubits: int = DENSE_MAX_QUBITS) -> PauliVectorSums:
    """Partial sums of the Pauli vectors v_i(P) = tr(P rho_i) / lambda_P on A over a chunk of snapshots.

    setting_positions (N,) index ``settings``; outcomes (N, n) bits; counts (N,)
    shots per record or None (one each); eigenvalue: a callable support mask ->
    lambda, or a table of 2^|A| values by support pattern (:func:`support_eigenvalues`).
    Per setting, V_s(P_e) = s_e W(e) / lambda_(P_e) with W the Walsh-Hadamard
    transform of the histogram of generator bits (module docstring).
    """
    qubits = np.asarray(qubits, dtype=np.int64)
    a, n = len(qubits), ensemble.n_qubits
    pos = np.asarray(setting_positions, dtype=np.int64)
    counts = np.ones(len(pos)) if counts is None else np.asarray(counts, dtype=float)
    used, where = np.unique(pos, return_inverse=True)
    shots = np.bincount(where, weights=counts, minlength=len(used))
    group = subgroup_on(ensemble, settings.take(used), qubits)
    beta = _generator_bits(outcomes, group.masks, where)
    table = _eigenvalue_table(eigenvalue, n, qubits)
    dense = a <= dense_max_qubits
    values = np.zeros(4**a if dense else 0)
    parts = []
    self_s, within_s = np.zeros(2**a), np.zeros(2**a)
    within_setting = np.zeros(len(used))
    local = np.full(len(used), -1)
    for k, sel in _batches(group.rank):
        codes, signs = group_elements(group.codes[sel, :k], group.signs[sel, :k])
        keys, pattern = pauli_keys(codes)
        if np.isnan(table[pattern]).any():
            missing = pattern[np.isnan(table[pattern])]
            fill = support_eigenvalues(eigenvalue, n, qubits, patterns=missing)
            table = np.where(np.isnan(table), fill, table)
        lam = table[pattern]
        local[sel] = np.arange(len(sel))
        rows = local[where]
        take = rows >= 0
        hist = np.bincount(rows[take] * 2**k + beta[take], weights=counts[take], minlength=len(sel) * 2**k)
        local[sel] = -1
        v = signs * walsh_hadamard(hist.reshape(len(sel), 2**k)) / lam
        if dense:
            values += np.bincount(keys.ravel(), weights=v.ravel(), minlength=4**a)
        else:
            parts.append((keys.ravel(), v.ravel()))
            if sum(len(p[0]) for p in parts) > SPARSE_PENDING:  # merge, to keep memory flat
                parts = [_sparse_sum([p[0] for p in parts], [p[1] for p in parts])]
        self_s += np.bincount(pattern.ravel(), weights=(shots[sel][:, None] / lam**2).ravel(), minlength=2**a)
        within_s += np.bincount(pattern.ravel(), weights=(v * v).ravel(), minlength=2**a)
        within_setting[sel] = np.sum(v * v, axis=1)
    keys = None
    if not dense:
        keys, values = _sparse_sum([p[0] for p in parts], [p[1] for p in parts])
    return PauliVectorSums(qubits, keys, values, self_s, within_s, used, shots, within_setting)


def _sparse_sum(keys, values):
    """Sorted distinct keys and the summed values of (possibly repeated) key lists."""
    if not keys:
        return np.zeros(0, dtype=np.int64), np.zeros(0)
    keys, inverse = np.unique(np.concatenate(keys), return_inverse=True)
    return keys, np.bincount(inverse, weights=np.concatenate(values), minlength=len(keys))


def add_sums(x: PauliVectorSums, y: PauliVectorSums) -> PauliVectorSums:
    """Partial sums of two chunks of snapshots together (same subsystem; disjoint settings)."""
    if not np.array_equal(x.qubits, y.qubits):
        raise ValueError("partial sums of different subsystems cannot be added")
    if np.intersect1d(x.setting_positions, y.setting_positions).size:
        raise ValueError("a setting's shots are split between two partial sums, so its within-setting "
                         "sum is lost; pass all shots of a setting in one call")
    if x.keys is None and y.keys is None:
        keys, values = None, x.values + y.values
    else:
        keys, values = _sparse_sum([_keys_of(x), _keys_of(y)], [x.values, y.values])
    return replace(x, keys=keys, values=values, self_by_support=x.self_by_support + y.self_by_support,
                   within_by_support=x.within_by_support + y.within_by_support,
                   setting_positions=np.concatenate([x.setting_positions, y.setting_positions]),
                   shots=np.concatenate([x.shots, y.shots]),
                   within_per_setting=np.concatenate([x.within_per_setting, y.within_per_setting]))


def _keys_of(x: PauliVectorSums) -> np.ndarray:
    return np.arange(len(x.values), dtype=np.int64) if x.keys is None else x.keys


def key_patterns(keys, n_a: int) -> np.ndarray:
    """Support pattern (bit t: qubit t of A) of Pauli keys on |A| = n_a qubits."""
    keys = np.asarray(keys, dtype=np.int64)
    pattern = np.zeros(keys.shape, dtype=np.int64)
    for t in range(n_a):
        pattern |= (((keys >> (2 * (n_a - 1 - t))) & 3) != 0).astype(np.int64) << t
    return pattern


def support_products(x: PauliVectorSums, y: PauliVectorSums | None = None) -> np.ndarray:
    """sum_(P with support pattern sigma) V_x(P) V_y(P) for every pattern sigma: (2^|A|,)."""
    y = x if y is None else y
    a = len(x.qubits)
    if x.keys is None and y.keys is None:
        return np.bincount(key_patterns(np.arange(4**a), a), weights=x.values * y.values, minlength=2**a)
    kx, ky = _keys_of(x), _keys_of(y)
    common, ix, iy = np.intersect1d(kx, ky, assume_unique=True, return_indices=True)
    return np.bincount(key_patterns(common, a), weights=x.values[ix] * y.values[iy], minlength=2**a)


def subset_sums(by_support) -> np.ndarray:
    """F(B) = sum_(sigma subset of B) f(sigma) over the last axis (2^|A| patterns)."""
    f = np.array(by_support, dtype=float)
    size = f.shape[-1]
    t = 1
    while t < size:
        v = f.reshape(f.shape[:-1] + (-1, 2, t))
        v[..., 1, :] += v[..., 0, :]
        t *= 2
    return f


def purities_from_sums(vv_by_support, diag_by_support, n_pairs) -> np.ndarray:
    """tr rho_B^2 for every subsystem B of A (index: pattern of B), from support-resolved sums.

    tr rho_B^2 ~ 2^-|B| sum_(sigma subset of B) (|V|^2_sigma - D_sigma) / n_pairs, with
    D = self_by_support and n_pairs = N (N - 1) for one shot per setting, or
    D = within_by_support and n_pairs = N^2 - sum_s n_s^2 for several (docs/design.md section 4).
    """
    total = subset_sums(np.asarray(vv_by_support, float) - np.asarray(diag_by_support, float))
    size = np.array([b.bit_count() for b in range(total.shape[-1])])
    return total / (2.0**size * np.asarray(n_pairs, dtype=float)[..., None])


def subsystem_purities(sums: PauliVectorSums) -> np.ndarray:
    """Purities of A and of all its subsystems (index: support pattern; last entry is A) from one V.

    One shot per setting: the closed-form self sums; several: pairs within a
    setting left out (needs each setting's shots in one partial sum).
    """
    if sums.shots.max(initial=0) <= 1:
        n = sums.n_snapshots
        return purities_from_sums(support_products(sums), sums.self_by_support, n * (n - 1))
    return purities_from_sums(support_products(sums), sums.within_by_support, sums.n_pairs)


def restrict(keys, values, qubits, subset, dense_max_qubits: int = DENSE_MAX_QUBITS):
    """The Pauli vector of A restricted to the Paulis supported in B (``subset`` of ``qubits``).

    Returns (keys on B or None when dense, values), keys numbered on B's own qubits.
    """
    qubits = list(np.asarray(qubits).tolist())
    inside = [qubits.index(q) for q in np.asarray(subset).tolist()]
    a, b = len(qubits), len(inside)
    keys = np.arange(len(values), dtype=np.int64) if keys is None else np.asarray(keys, dtype=np.int64)
    digits = np.stack([(keys >> (2 * (a - 1 - t))) & 3 for t in range(a)], axis=-1)
    outside = np.setdiff1d(np.arange(a), inside)
    keep = ~digits[:, outside].any(axis=1)
    new = digits[keep][:, inside] @ (4 ** np.arange(b - 1, -1, -1, dtype=np.int64))
    if b <= dense_max_qubits:
        return None, np.bincount(new, weights=np.asarray(values)[keep], minlength=4**b)
    order = np.argsort(new)
    return new[order], np.asarray(values)[keep][order]
