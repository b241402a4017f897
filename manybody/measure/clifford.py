"""Clifford tables: the 24 one-qubit and 11520 two-qubit Cliffords, signs included.

Pauli codes. One qubit: 0 = I, 1 = X, 2 = Z, 3 = Y (bit 0 is x, bit 1 is z).
Two qubits (a, b) of a gate: code = c_a + 4 c_b, so 0..15.

Canonical enumeration (fixed forever: a gate index in a file keeps its
meaning). A Clifford C is known up to a global phase by its tableau: the
images C G C^dagger = s_G Q_G of the generators G = X_a, Z_a (, X_b, Z_b),
each a Hermitian Pauli Q_G (code as above) with a sign s_G = +-1. Gates are
sorted by the tuple of image codes (Q_Xa, Q_Za, Q_Xb, Q_Zb), then by the
sign bits; gate index = rank * 2^(number of generators) + sign bits, with
sign bit j (1 = minus) for generator j in the order above. So index 0 of
both tables is the identity, and two-qubit index 16 * r + m differs from
16 * r only by the Pauli-frame signs m.

Each gate also has its unitary (4x4 or 2x2, phase fixed so that the first
nonzero entry is real and positive) and a shortest decomposition into the
OpenQASM standard gates h, s, sdg, x, y, z, cx (time order).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache

import numpy as np

from hamiltonians.pauli import product_phase

_I2 = np.eye(2, dtype=complex)
_H = np.array([[1, 1], [1, -1]], dtype=complex) / np.sqrt(2)
_S = np.diag([1, 1j])
_SINGLE = {"h": _H, "s": _S, "sdg": _S.conj(), "x": np.array([[0, 1], [1, 0]], dtype=complex),
           "y": np.array([[0, -1j], [1j, 0]]), "z": np.diag([1.0 + 0j, -1.0])}
_PAULI_1Q = {0: _I2, 1: _SINGLE["x"], 2: _SINGLE["z"], 3: _SINGLE["y"]}


def pauli_matrix_2q(code: int) -> np.ndarray:
    """Dense 4x4 Pauli of a two-qubit code (qubit a is the first Kronecker factor)."""
    return np.kron(_PAULI_1Q[code & 3], _PAULI_1Q[code >> 2])


def gate_matrix(name: str, qubits: tuple[int, ...], n: int) -> np.ndarray:
    """Dense unitary of one standard gate on ``n`` qubits (qubit 0 = first factor)."""
    if name == "cx":
        c, t = qubits
        dim = 2**n
        out = np.zeros((dim, dim), dtype=complex)
        for col in range(dim):
            bits = [(col >> (n - 1 - q)) & 1 for q in range(n)]
            if bits[c]:
                bits[t] ^= 1
            out[sum(b << (n - 1 - q) for q, b in enumerate(bits)), col] = 1
        return out
    mats = [_I2] * n
    mats[qubits[0]] = _SINGLE[name]
    out = mats[0]
    for m in mats[1:]:
        out = np.kron(out, m)
    return out


def word_unitary(word, n: int) -> np.ndarray:
    """Unitary of a gate list in time order: U = G_k ... G_1."""
    u = np.eye(2**n, dtype=complex)
    for name, qubits in word:
        u = gate_matrix(name, qubits, n) @ u
    return u


@dataclass(frozen=True, eq=False)
class CliffordTable:
    """All Cliffords on ``n`` (1 or 2) qubits in canonical order.

    images : (G, 2n) generator image codes; signs : (G, 2n) +-1.
    unitaries : (G, 2^n, 2^n). words : per gate, a tuple of (name, qubits).
    conj_code, conj_sign : (G, 4^n) action on every Pauli code P:
        C P C^dagger = conj_sign[g, P] * Pauli(conj_code[g, P]).
    """

    n_qubits: int
    images: np.ndarray
    signs: np.ndarray
    unitaries: np.ndarray
    words: tuple
    conj_code: np.ndarray
    conj_sign: np.ndarray

    def __len__(self) -> int:
        return len(self.images)


def _canonical_phase(us: np.ndarray) -> np.ndarray:
    flat = us.reshape(len(us), -1)
    first = np.argmax(np.abs(flat) > 0.1, axis=1)
    ph = flat[np.arange(len(us)), first]
    return us / (ph / np.abs(ph))[:, None, None]


def _keys(us: np.ndarray) -> list[bytes]:
    flat = np.round(_canonical_phase(us).reshape(len(us), -1) * 1e6)
    ints = np.concatenate([flat.real, flat.imag], axis=1).astype(np.int64)
    return [row.tobytes() for row in ints]


def _generators(n: int):
    gens = [(name, (q,)) for q in range(n) for name in ("h", "s", "sdg", "x", "y", "z")]
    if n == 2:
        gens += [("cx", (0, 1)), ("cx", (1, 0))]
    return gens


def _pauli_basis(n: int) -> np.ndarray:
    if n == 1:
        return np.array([_PAULI_1Q[c] for c in range(4)])
    return np.array([pauli_matrix_2q(c) for c in range(16)])


def _code_bits(codes: np.ndarray, n: int):
    """x and z bits (one uint8 per qubit on the last axis) of Pauli codes."""
    codes = np.asarray(codes)
    x = np.stack([(codes >> (2 * q)) & 1 for q in range(n)], axis=-1).astype(np.uint8)
    z = np.stack([(codes >> (2 * q + 1)) & 1 for q in range(n)], axis=-1).astype(np.uint8)
    return x, z


def _bits_code(x: np.ndarray, z: np.ndarray, n: int) -> np.ndarray:
    return sum((x[..., q].astype(np.int64) << (2 * q)) | (z[..., q].astype(np.int64) << (2 * q + 1))
               for q in range(n))


def conjugation_table(images: np.ndarray, signs: np.ndarray, n: int):
    """Action C P C^dagger of every gate on every Pauli code, from the generator images.

    P = i^(y) X_a^xa Z_a^za X_b^xb Z_b^zb, so C P C^dagger is i^y times the
    ordered product of the images of the generators present in P.
    """
    n_gates = len(images)
    out_code = np.zeros((n_gates, 4**n), dtype=np.uint8)
    out_sign = np.zeros((n_gates, 4**n), dtype=np.int8)
    img_x, img_z = _code_bits(images, n)  # (G, 2n, n)
    for p in range(4**n):
        px, pz = _code_bits(np.array(p), n)
        rx = np.zeros((n_gates, n), dtype=np.uint8)
        rz = np.zeros((n_gates, n), dtype=np.uint8)
        phase = np.full(n_gates, int(np.sum(px & pz)) % 4)
        sign = np.ones(n_gates, dtype=np.int64)
        for q in range(n):
            for j, present in ((2 * q, px[q]), (2 * q + 1, pz[q])):
                if present:
                    rx, rz, k = product_phase(rx, rz, img_x[:, j], img_z[:, j])
                    phase = phase + k
                    sign = sign * signs[:, j]
        phase %= 4
        if np.any(phase % 2):
            raise AssertionError("Clifford image of a Hermitian Pauli must be Hermitian")
        out_code[:, p] = _bits_code(rx, rz, n)
        out_sign[:, p] = sign * np.where(phase == 2, -1, 1)
    return out_code, out_sign


@cache
def clifford_table(n: int) -> CliffordTable:
    """The canonical table of all Cliffords on one or two qubits (built once, by breadth-first search)."""
    if n not in (1, 2):
        raise ValueError("tables exist for one- and two-qubit Cliffords only")
    gens = _generators(n)
    gmats = np.array([word_unitary([g], n) for g in gens])
    ident = np.eye(2**n, dtype=complex)[None]
    seen = {_keys(ident)[0]: 0}
    unitaries = [ident[0]]
    words = [()]
    frontier = [0]
    while frontier:
        fu = np.array([unitaries[i] for i in frontier])
        prods = np.einsum("gij,fjk->fgik", gmats, fu).reshape(-1, 2**n, 2**n)
        keys = _keys(prods)
        new = []
        for idx, key in enumerate(keys):
            if key not in seen:
                f, g = divmod(idx, len(gens))
                seen[key] = len(unitaries)
                unitaries.append(prods[idx])
                words.append(words[frontier[f]] + (gens[g],))
                new.append(len(unitaries) - 1)
        frontier = new
    us = _canonical_phase(np.array(unitaries))
    expected = 24 if n == 1 else 11520
    if len(us) != expected:
        raise AssertionError(f"found {len(us)} Cliffords on {n} qubits, expected {expected}")

    # tableau: images of X_q, Z_q for q = 0..n-1 (code bits: x at 2q, z at 2q+1)
    basis = _pauli_basis(n)
    gen_codes = [c for q in range(n) for c in (1 << (2 * q), 2 << (2 * q))]
    conj = np.einsum("gij,pjk,glk->gpil", us, basis[gen_codes], us.conj())
    overlap = np.einsum("qji,gpij->gpq", basis, conj).real / 2**n  # tr(Q M) / 2^n
    images = np.argmax(np.abs(overlap), axis=2)
    signs = np.sign(np.take_along_axis(overlap, images[..., None], axis=2)[..., 0]).astype(np.int8)
    sign_bits = ((signs < 0) * (1 << np.arange(2 * n))).sum(axis=1)
    order = np.lexsort([sign_bits] + [images[:, j] for j in reversed(range(2 * n))])
    images, signs, us = images[order].astype(np.uint8), signs[order], us[order]
    words = tuple(words[i] for i in order)
    conj_code, conj_sign = conjugation_table(images, signs, n)
    return CliffordTable(n, images, signs, us, words, conj_code, conj_sign)

