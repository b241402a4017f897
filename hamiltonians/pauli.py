"""PauliExpansion: a weighted sum of Pauli strings stored as packed bit arrays.

A Pauli string on ``n`` qubits is stored as two bit rows ``x`` and ``z``
(qubit ``q`` in word ``q // 64``, bit ``q % 64``) with the convention

    P(x, z) = i^(x.z) X^x Z^z,

so that ``x = z = 1`` on a qubit is sigma^y (Y = iXZ) and every P(x, z) is a
Hermitian tensor product of sigma^x, sigma^y, sigma^z. The product of two
strings follows from X^a Z^b X^c Z^d = (-1)^(b.c) X^(a+c) Z^(b+d):

    P1 P2 = i^(y1 + y2 - y3 + 2 z1.x2) P3,   x3 = x1 ^ x2, z3 = z1 ^ z2,

with ``y = popcount(x & z)`` (the number of Y factors).

Each term also carries an *anchor*: the qubits it is attributed to when an
energy is split into an energy density (docs/design.md section 4). By default it
is the support; a Jordan-Wigner hopping term is anchored to its two orbitals
rather than to its string of Z factors.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

PAULI_LETTERS = "IXYZ"
_LETTER_X = {"I": 0, "X": 1, "Y": 1, "Z": 0}
_LETTER_Z = {"I": 0, "X": 0, "Y": 1, "Z": 1}
_SIGMA = {
    "I": np.eye(2, dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


def pack_bits(bits: np.ndarray) -> np.ndarray:
    """(m, n) booleans -> (m, ceil(n/64)) uint64 words, qubit q at bit q % 64."""
    bits = np.asarray(bits, dtype=bool)
    m, n = bits.shape
    w = max(1, -(-n // 64))
    padded = np.zeros((m, w * 64), dtype=bool)
    padded[:, :n] = bits
    return np.packbits(padded, axis=1, bitorder="little").view("<u8").astype(np.uint64)


def unpack_bits(words: np.ndarray, n: int) -> np.ndarray:
    """Inverse of :func:`pack_bits`."""
    words = np.ascontiguousarray(words, dtype="<u8")
    return np.unpackbits(words.view(np.uint8), axis=1, bitorder="little")[:, :n].astype(bool)


def _popcount_rows(words: np.ndarray) -> np.ndarray:
    return np.bitwise_count(words).sum(axis=-1, dtype=np.int64)


_PARITY_SIGN = np.array([1.0, -1.0])


def _parity_signs(z_masks: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """S[j, r] = (-1)^popcount(z_j & r) for integer z masks and basis-state indices."""
    return _PARITY_SIGN[np.bitwise_count(z_masks[:, None] & rows[None, :]) & np.uint8(1)]


def _group_table(op: "PauliExpansion", dtype):
    """Strings grouped by x mask: A[g, j] = sum of c_t i^(y_t) (-1)^(z_t.x_t) over the
    strings t with x mask ux[g] and z mask uz[j] (integer masks, qubit 0 most significant).

    Groups holding a single string come first; returns (A, ux, uz, their number).
    ``dtype`` None picks float when every i^y c_t is real (a Hermitian sum).
    """
    xm, zm = op.integer_masks()
    phased = op.coeffs * (1j ** (_popcount_rows(op.x & op.z) % 4))
    if dtype is None:
        dtype = float if np.all(np.abs(phased.imag) <= 1e-14) else complex
    dtype = np.dtype(dtype)
    phased = phased.real.astype(dtype) if dtype.kind == "f" else phased.astype(dtype)
    ux, xinv = np.unique(xm, return_inverse=True)
    uz, zinv = np.unique(zm, return_inverse=True)
    shared = np.bincount(xinv, minlength=len(ux)) > 1
    order = np.argsort(shared, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    flip = 1.0 - 2.0 * (np.bitwise_count(xm & zm) & 1)
    amat = np.zeros((len(ux), len(uz)), dtype=dtype)
    np.add.at(amat, (rank[xinv], zinv), phased * flip)
    return amat, ux[order], uz, int(np.count_nonzero(~shared))


def _block_values(amat: np.ndarray, low_signs: np.ndarray, uz: np.ndarray, start: int) -> np.ndarray:
    """Entries of rows start + k (k < block, start a multiple of the power of two block).

    Returns V[k, g] = sum_j A[g, j] S[j, start + k]; since start and k share no
    bit, S[j, start + k] = S[j, start] S[j, k], and ``low_signs`` holds S[j, k]^T.
    """
    high = _parity_signs(uz, np.array([start], dtype=np.uint64))[:, 0]
    return low_signs @ (amat * high).T


def _row_pattern(a_cancel, low_signs, uz, n_lone: int, dim: int):
    """First pass: CSR row pointers and the nonzero pattern of the groups that may cancel.

    Returns (indptr, pattern) with pattern[r] the bits (np.packbits, one per
    row of ``a_cancel``) of the nonzero entries of row r among those groups,
    or None when no group can cancel.
    """
    indptr = np.zeros(dim + 1, dtype=np.int64)
    if len(a_cancel) == 0:
        indptr[1:] = n_lone
        np.cumsum(indptr, out=indptr)
        return indptr, None
    block = len(low_signs)
    pattern = np.empty((dim, -(-len(a_cancel) // 8)), dtype=np.uint8)
    for start in range(0, dim, block):
        nonzero = _block_values(a_cancel, low_signs, uz, start) != 0
        pattern[start:start + block] = np.packbits(nonzero, axis=1)
        indptr[start + 1:start + block + 1] = n_lone + np.count_nonzero(nonzero, axis=1)
    np.cumsum(indptr, out=indptr)
    return indptr, pattern


def product_phase(x1, z1, x2, z2):
    """Product of Hermitian Pauli strings: P(x1, z1) P(x2, z2) = i^k P(x1 ^ x2, z1 ^ z2).

    k = y1 + y2 - y3 + 2 z1.x2 (mod 4), with y = popcount(x & z). Works on
    any unsigned integer arrays whose last axis runs over words (packed
    bits) or over qubits (one bit per entry); leading axes broadcast.
    Returns (x3, z3, k).
    """
    x3, z3 = x1 ^ x2, z1 ^ z2
    k = (_popcount_rows(x1 & z1) + _popcount_rows(x2 & z2) - _popcount_rows(x3 & z3)
         + 2 * _popcount_rows(z1 & x2)) % 4
    return x3, z3, k


class PauliExpansion:
    """Sum_t c_t P_t over Pauli strings on ``n_qubits`` qubits.

    Immutable in use: every operation returns a new expansion. Terms are not
    combined automatically; call :meth:`simplify` (keeps anchors apart) or
    :meth:`combined` (merges equal strings whatever their anchors).
    """

    __slots__ = ("n_qubits", "x", "z", "coeffs", "anchor")

    def __init__(self, n_qubits, x, z, coeffs, anchor=None):
        self.n_qubits = int(n_qubits)
        self.x = np.ascontiguousarray(x, dtype=np.uint64)
        self.z = np.ascontiguousarray(z, dtype=np.uint64)
        self.coeffs = np.ascontiguousarray(coeffs, dtype=complex)
        self.anchor = (self.x | self.z) if anchor is None else np.ascontiguousarray(anchor, dtype=np.uint64)
        w = max(1, -(-self.n_qubits // 64))
        if self.x.shape != (len(self.coeffs), w) or self.z.shape != self.x.shape or self.anchor.shape != self.x.shape:
            raise ValueError("inconsistent shapes in PauliExpansion")

    # ------------------------------------------------------------------ build
    @classmethod
    def zero(cls, n_qubits: int) -> "PauliExpansion":
        w = max(1, -(-n_qubits // 64))
        e = np.zeros((0, w), dtype=np.uint64)
        return cls(n_qubits, e, e, np.zeros(0))

    @classmethod
    def identity(cls, n_qubits: int, coeff: complex = 1.0) -> "PauliExpansion":
        w = max(1, -(-n_qubits // 64))
        e = np.zeros((1, w), dtype=np.uint64)
        return cls(n_qubits, e, e, [coeff])

    @classmethod
    def from_bits(cls, x_bits, z_bits, coeffs, anchor_bits=None) -> "PauliExpansion":
        x_bits = np.atleast_2d(np.asarray(x_bits, dtype=bool))
        n = x_bits.shape[1]
        anchor = None if anchor_bits is None else pack_bits(anchor_bits)
        return cls(n, pack_bits(x_bits), pack_bits(z_bits), np.broadcast_to(coeffs, len(x_bits)), anchor)

    @classmethod
    def from_strings(cls, strings, coeffs=1.0) -> "PauliExpansion":
        """From strings over I, X, Y, Z (character q acts on qubit q)."""
        strings = [strings] if isinstance(strings, str) else list(strings)
        if not strings:
            raise ValueError("no Pauli strings given")
        n = len(strings[0])
        if any(len(s) != n for s in strings):
            raise ValueError("Pauli strings must all have the same length")
        arr = np.array([list(s) for s in strings]).reshape(len(strings), n)
        bad = ~np.isin(arr, list(PAULI_LETTERS))
        if bad.any():
            i, q = np.argwhere(bad)[0]
            raise ValueError(f"Pauli string {strings[i]!r} has {arr[i, q]!r} at qubit {q}; allowed: I, X, Y, Z")
        xb = (arr == "X") | (arr == "Y")
        zb = (arr == "Z") | (arr == "Y")
        return cls.from_bits(xb, zb, np.broadcast_to(np.asarray(coeffs, dtype=complex), len(strings)))

    @classmethod
    def from_local(cls, n_qubits: int, letters: str, sites, coeffs=1.0, anchor=None) -> "PauliExpansion":
        """Many copies of one local pattern: ``letters[k]`` on qubit ``sites[t, k]``.

        ``sites`` is an (m, k) integer array, one row per term (e.g. the bond
        list for a two-qubit pattern). Sites in a row must be distinct.
        ``anchor`` optionally gives an (m, j) array of qubits each term is
        attributed to (default: its support).
        """
        sites = np.asarray(sites, dtype=int).reshape(-1, len(letters))
        m = len(sites)
        rows = np.repeat(np.arange(m), len(letters))
        cols = sites.ravel()
        xb = np.zeros((m, n_qubits), dtype=bool)
        zb = np.zeros((m, n_qubits), dtype=bool)
        xb[rows, cols] = np.tile([_LETTER_X[c] for c in letters], m).astype(bool)
        zb[rows, cols] = np.tile([_LETTER_Z[c] for c in letters], m).astype(bool)
        ab = None
        if anchor is not None:
            anchor = np.asarray(anchor, dtype=int).reshape(m, -1)
            ab = np.zeros((m, n_qubits), dtype=bool)
            ab[np.repeat(np.arange(m), anchor.shape[1]), anchor.ravel()] = True
        coeffs = np.broadcast_to(np.asarray(coeffs, dtype=complex), m)
        return cls.from_bits(xb, zb, coeffs, ab)

    # ------------------------------------------------------------ properties
    def __len__(self) -> int:
        return len(self.coeffs)

    @property
    def n_terms(self) -> int:
        return len(self.coeffs)

    @property
    def x_bits(self) -> np.ndarray:
        return unpack_bits(self.x, self.n_qubits)

    @property
    def z_bits(self) -> np.ndarray:
        return unpack_bits(self.z, self.n_qubits)

    @property
    def anchor_bits(self) -> np.ndarray:
        return unpack_bits(self.anchor, self.n_qubits)

    @property
    def support(self) -> np.ndarray:
        """(m, n) booleans: qubits where each term is not the identity."""
        return unpack_bits(self.x | self.z, self.n_qubits)

    @property
    def weights(self) -> np.ndarray:
        return _popcount_rows(self.x | self.z)

    def strings(self) -> list[str]:
        codes = self.x_bits.astype(np.int8) + 2 * self.z_bits.astype(np.int8)
        table = np.array(list("IXZY"))
        return ["".join(row) for row in table[codes]]

    def norm1(self) -> float:
        """Sum of |c_P| over non-identity strings, after combining equal strings."""
        c = self.combined()
        return float(np.abs(c.coeffs[c.weights > 0]).sum())

    def constant(self) -> complex:
        """Coefficient of the identity."""
        return complex(self.coeffs[self.weights == 0].sum())

    def is_hermitian(self, atol: float = 1e-12) -> bool:
        return bool(np.all(np.abs(self.combined().coeffs.imag) <= atol))

    def __repr__(self) -> str:
        return f"PauliExpansion({self.n_qubits} qubits, {self.n_terms} terms)"

    def __str__(self) -> str:
        rows = [f"{c.real:+.6g}{c.imag:+.6g}j {s}" if abs(c.imag) > 0 else f"{c.real:+.6g} {s}"
                for c, s in zip(self.coeffs, self.strings())]
        return "\n".join(rows) if rows else "0"

    # --------------------------------------------------------------- algebra
    def _check(self, other: "PauliExpansion"):
        if not isinstance(other, PauliExpansion):
            return NotImplemented
        if other.n_qubits != self.n_qubits:
            raise ValueError(f"qubit numbers differ: {self.n_qubits} and {other.n_qubits}")
        return other

    def __add__(self, other):
        if np.isscalar(other):
            other = PauliExpansion.identity(self.n_qubits, other)
        other = self._check(other)
        if other is NotImplemented:
            return other
        return PauliExpansion(
            self.n_qubits, np.vstack([self.x, other.x]), np.vstack([self.z, other.z]),
            np.concatenate([self.coeffs, other.coeffs]), np.vstack([self.anchor, other.anchor]))

    __radd__ = __add__

    def __neg__(self):
        return self * -1.0

    def __sub__(self, other):
        return self + (-other)

    def __rsub__(self, other):
        return (-self) + other

    def __mul__(self, other):
        if np.isscalar(other):
            return PauliExpansion(self.n_qubits, self.x, self.z, self.coeffs * other, self.anchor)
        other = self._check(other)
        if other is NotImplemented:
            return other
        return self.multiply(other)

    def __rmul__(self, other):
        if np.isscalar(other):
            return self * other
        return NotImplemented

    def __matmul__(self, other):
        return self.multiply(other)

    def multiply(self, other: "PauliExpansion", chunk: int = 4096) -> "PauliExpansion":
        """Operator product self * other with exact phases, simplified chunk by chunk."""
        other = self._check(other)
        total = PauliExpansion.zero(self.n_qubits)
        for start in range(0, max(len(self), 1), chunk):
            sl = slice(start, start + chunk)
            x1, z1, c1, a1 = self.x[sl, None], self.z[sl, None], self.coeffs[sl, None], self.anchor[sl, None]
            if x1.shape[0] == 0:
                break
            x3, z3, k = product_phase(x1, z1, other.x[None], other.z[None])
            coeff = c1 * other.coeffs[None] * (1j ** k)
            w = self.x.shape[1]
            part = PauliExpansion(self.n_qubits, x3.reshape(-1, w), z3.reshape(-1, w), coeff.ravel(),
                                  (a1 | other.anchor[None]).reshape(-1, w))
            total = (total + part).simplify()
        return total

    def adjoint(self) -> "PauliExpansion":
        return PauliExpansion(self.n_qubits, self.x, self.z, self.coeffs.conj(), self.anchor)

    def simplify(self, atol: float = 0.0) -> "PauliExpansion":
        """Combine terms with equal string and equal anchor; drop |c| <= atol."""
        return self._merge(np.hstack([self.x, self.z, self.anchor]), atol, keep_anchor=True)

    def combined(self, atol: float = 0.0) -> "PauliExpansion":
        """Combine terms with equal string whatever their anchor (anchor := support)."""
        return self._merge(np.hstack([self.x, self.z]), atol, keep_anchor=False)

    def _merge(self, keys, atol, keep_anchor):
        if len(self) == 0:
            return self
        uniq, first, inv = np.unique(keys, axis=0, return_index=True, return_inverse=True)
        coeffs = np.zeros(len(uniq), dtype=complex)
        np.add.at(coeffs, inv.ravel(), self.coeffs)
        keep = np.abs(coeffs) > atol
        w = self.x.shape[1]
        anchor = self.anchor[first][keep] if keep_anchor else None
        return PauliExpansion(self.n_qubits, uniq[keep, :w], uniq[keep, w:2 * w], coeffs[keep], anchor)

    def real_if_close(self, atol: float = 1e-12) -> np.ndarray:
        c = self.coeffs
        return c.real if np.all(np.abs(c.imag) <= atol) else c

    # ----------------------------------------------------------- conversions
    def to_qubit_operator(self):
        """As an openfermion QubitOperator."""
        from openfermion import QubitOperator

        op = QubitOperator()
        xb, zb = self.x_bits, self.z_bits
        letter = np.array(["", "X", "Z", "Y"])
        for t in range(len(self)):
            code = xb[t].astype(int) + 2 * zb[t].astype(int)
            qs = np.flatnonzero(code)
            op += QubitOperator(tuple((int(q), str(letter[code[q]])) for q in qs), complex(self.coeffs[t]))
        return op

    @classmethod
    def from_qubit_operator(cls, op, n_qubits: int, anchor=None) -> "PauliExpansion":
        """From an openfermion QubitOperator; ``anchor`` (qubit list) applies to every term."""
        items = list(op.terms.items())
        m = len(items)
        xb = np.zeros((m, n_qubits), dtype=bool)
        zb = np.zeros((m, n_qubits), dtype=bool)
        coeffs = np.zeros(m, dtype=complex)
        for t, (term, c) in enumerate(items):
            coeffs[t] = c
            for q, p in term:
                if q >= n_qubits:
                    raise ValueError(f"operator acts on qubit {q}, beyond {n_qubits} qubits")
                xb[t, q] = p in "XY"
                zb[t, q] = p in "YZ"
        ab = None
        if anchor is not None:
            ab = np.zeros((m, n_qubits), dtype=bool)
            ab[:, list(anchor)] = True
        return cls.from_bits(xb, zb, coeffs, ab) if m else cls.zero(n_qubits)

    def integer_masks(self) -> tuple[np.ndarray, np.ndarray]:
        """x and z as integers over basis-state indices (qubit 0 = most significant bit)."""
        n = self.n_qubits
        if n > 62:
            raise ValueError(f"{n} qubits are too many for a state-vector representation")
        weights = (np.uint64(1) << np.arange(n - 1, -1, -1, dtype=np.uint64))
        xm = (self.x_bits.astype(np.uint64) * weights).sum(axis=1, dtype=np.uint64)
        zm = (self.z_bits.astype(np.uint64) * weights).sum(axis=1, dtype=np.uint64)
        return xm, zm

    def to_sparse(self, dtype=None, chunk: int = 1 << 13) -> sp.csr_matrix:
        """The 2^n x 2^n matrix in CSR form, built without Kronecker products.

        A string maps |c> to i^y (-1)^(z.c) |c ^ x>, so row ``r`` has one entry
        per distinct x mask, in column ``r ^ x``, of value

            sum_t c_t i^(y_t) (-1)^(z_t.x) (-1)^(z_t.r)    (t with x_t = x).

        With S[j, r] = (-1)^(z_j.r) over the distinct z masks, the values of a
        chunk of rows are matrix products S^T A^T. A group of one string never
        gives a zero; groups of several may cancel. Their nonzero pattern is
        found in a first pass over the rows and kept as one bit per candidate
        entry; the second pass fills arrays of exactly that size and takes the
        structure from those bits, never from a fresh test of the recomputed
        values, so rounding cannot make the two passes disagree (a recomputed
        value at a kept position may at worst be an explicit 0.0). Peak memory
        stays close to the size of the result. Column indices within a row are
        left unsorted (scipy sorts on demand).
        """
        op = self.combined()
        n = op.n_qubits
        if n > 30:
            raise ValueError(f"{n} qubits are too many for a sparse matrix")
        dim = 1 << n
        amat, ux, uz, n_lone = _group_table(op, dtype)
        if len(ux) == 0:
            return sp.csr_matrix((dim, dim), dtype=amat.dtype)
        a_lone, a_cancel = amat[:n_lone], amat[n_lone:]
        # rows per block: a power of two, at most 1/16 of the rows so that temporaries stay small
        block = 1 << max(0, min(int(chunk).bit_length() - 1, n - 4))
        low = np.arange(block, dtype=np.uint64)
        low_signs = np.ascontiguousarray(_parity_signs(uz, low).T)
        indptr, pattern = _row_pattern(a_cancel, low_signs, uz, n_lone, dim)
        nnz = int(indptr[-1])
        index_dtype = np.int64 if max(nnz, dim) >= 2**31 else np.int32
        data = np.empty(nnz, dtype=amat.dtype)
        indices = np.empty(nnz, dtype=index_dtype)
        low_cols = low.astype(index_dtype)[:, None] ^ ux.astype(index_dtype)[None, :]  # (start + k) ^ x
        keep = np.ones(low_cols.shape, dtype=bool)
        for start in range(0, dim, block):
            # cancelling groups by the same product as in the first pass: a kept entry is 0.0
            # only if the BLAS rounds differently from one call to the next
            vals = np.hstack([_block_values(a_lone, low_signs, uz, start),
                              _block_values(a_cancel, low_signs, uz, start)])
            lo, hi = indptr[start], indptr[start + block]
            if hi - lo == vals.size:  # the pattern keeps every entry of these rows
                data[lo:hi] = vals.ravel()  # row-major: entries of one row together
                np.bitwise_xor(low_cols.ravel(), start, out=indices[lo:hi])
            else:
                keep[:, n_lone:] = np.unpackbits(pattern[start:start + block], axis=1, count=len(a_cancel))
                kept = np.flatnonzero(keep)
                np.take(vals.ravel(), kept, out=data[lo:hi])
                np.take(low_cols.ravel(), kept, out=indices[lo:hi])
                indices[lo:hi] ^= start
        mat = sp.csr_matrix((data, indices, indptr.astype(index_dtype)), shape=(dim, dim))
        mat.has_sorted_indices = False
        return mat

    def to_dense(self) -> np.ndarray:
        return self.to_sparse(dtype=complex).toarray()

    def to_mpo(self, cutoff: float = 1e-12):
        """As a quimb MatrixProductOperator along the qubit order.

        Exact finite-automaton construction: the bond state between qubits
        k-1 and k is "not started" (0), "done" (1), or one open channel per
        distinct left part of the strings that cross the cut. The
        coefficient sits on the last factor of each string. Compressed
        afterwards, dropping singular values below ``cutoff`` times the largest.
        """
        import quimb.tensor as qtn

        op = self.combined()
        n = op.n_qubits
        if n < 2:
            raise ValueError("an MPO needs at least two qubits")
        codes = op.x_bits.astype(int) + 2 * op.z_bits.astype(int)
        letters = "IXZY"
        channels = [dict() for _ in range(n + 1)]  # cut q sits left of qubit q
        steps = [[] for _ in range(n)]  # (left state, right state, letter, coeff)
        n_y = _popcount_rows(op.x & op.z)
        scaled = op.coeffs * (-1j) ** (n_y % 4)
        for t in range(len(op)):
            sup = np.flatnonzero(codes[t])
            c = complex(scaled[t])
            if len(sup) == 0:
                steps[0].append((0, 1, "I", c))
                continue
            first, last = int(sup[0]), int(sup[-1])
            left, prefix = 0, ()
            for q in range(first, last + 1):
                letter = letters[codes[t, q]]
                if q == last:
                    steps[q].append((left, 1, letter, c))
                else:
                    prefix += (letter,)
                    known = channels[q + 1]
                    if (first, prefix) not in known:  # a shared left part is one channel
                        known[(first, prefix)] = len(known)
                        steps[q].append((left, 2 + known[(first, prefix)], letter, 1.0))
                    left = 2 + known[(first, prefix)]
        # Y = -i Yr with the real matrix Yr = iY: a string with k factors Y is
        # c (-i)^k times a product of real matrices, so real-valued Hamiltonians
        # get a real MPO (half the memory, faster DMRG).
        is_real = bool(np.all(np.abs(scaled.imag) <= 1e-14))
        mats = {**_SIGMA, "Y": np.array([[0, 1], [-1, 0]], dtype=complex)}
        arrays = []
        for q in range(n):
            w = np.zeros((2 + len(channels[q]), 2 + len(channels[q + 1]), 2, 2), dtype=complex)
            w[0, 0] = w[1, 1] = mats["I"]
            for left, right, letter, c in steps[q]:
                w[left, right] += c * mats[letter]
            w = w.real if is_real else w
            arrays.append(w[0] if q == 0 else (w[:, 1] if q == n - 1 else w))
        mpo = qtn.MatrixProductOperator(arrays, shape="lrud")
        mpo.compress(cutoff=cutoff, cutoff_mode="rel")
        return mpo
