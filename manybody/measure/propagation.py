"""Pauli propagation: the snapshot values <b|U P U^dagger|b> in {-1, 0, +1}.

With Clifford U, U P U^dagger = s Q for a Pauli Q; the value is s (-1)^(sum
of outcome bits on the support of Q) when Q is Z-type after the final basis
rotation, and 0 otherwise (docs/design.md section 3). Propagation runs once per
setting (a table look-up per gate in the light cone, vectorised over all
settings); the outcome bits then give every snapshot's value.

Pauli strings here are one-qubit codes per qubit: 0 I, 1 X, 2 Z, 3 Y.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from hamiltonians.pauli import pack_bits, product_phase
from manybody.measure.clifford import clifford_table
from manybody.measure.paulis import BASIS_PAULI


def propagate_layers(codes: np.ndarray, gates: np.ndarray, gate_qubits: np.ndarray):
    """Push a Pauli through the gate slots of every setting.

    codes : (n,) one-qubit codes of P; gates : (K, G) Clifford indices;
    gate_qubits : (G, 2). Returns codes (K, n) and signs (K,) with
    U P U^dagger = sign * Q(codes). Only gates in the light cone are applied.
    """
    table = clifford_table(2)
    k = len(gates)
    out = np.broadcast_to(np.asarray(codes, dtype=np.uint8), (k, len(codes))).copy()
    sign = np.ones(k, dtype=np.int8)
    active = np.asarray(codes) != 0
    for slot, (a, b) in enumerate(np.asarray(gate_qubits).tolist()):
        if not (active[a] or active[b]):
            continue
        active[a] = active[b] = True
        pc = out[:, a] + 4 * out[:, b]
        g = gates[:, slot]
        new = table.conj_code[g, pc]
        sign *= table.conj_sign[g, pc]
        out[:, a] = new & 3
        out[:, b] = new >> 2
    return out, sign


def pull_back_layers(codes: np.ndarray, gates: np.ndarray | None, gate_qubits) -> np.ndarray:
    """C^dag Q C for strings Q (K, ..., n) of every setting (signs dropped), gate slots in reverse order.

    ``gates`` (K, G) Clifford indices; the inverse of the Clifford table's
    conjugation map gives C^dag Q C per gate. Used to find the generators
    U^dag P_j U of a snapshot's stabilizer group (P_j one-site, already taken
    back through the basis rotation). ``codes`` is updated in place and returned.
    """
    if gates is None or gates.shape[1] == 0:
        return codes
    inverse = np.argsort(clifford_table(2).conj_code, axis=1).astype(np.uint8)
    per_setting = (-1,) + (1,) * (codes.ndim - 2)  # a setting's gate broadcast over its strings
    for slot in range(len(gate_qubits) - 1, -1, -1):
        a, b = gate_qubits[slot]
        new = inverse[gates[:, slot].reshape(per_setting), codes[..., a] + 4 * codes[..., b]]
        codes[..., a], codes[..., b] = new & 3, new >> 2
    return codes


#: settings x strings x qubits handled at once when propagating inside light-cone windows
WINDOW_ENTRIES = 1 << 24
#: snapshots x strings x 64-bit words handled at once when evaluating packed images
PACKED_ENTRIES = 1 << 21


def light_cone_windows(codes: np.ndarray, gate_qubits: np.ndarray):
    """Each string's forward light cone as a window of qubits, and the gate slots inside it.

    Returns sites (S, w) int (padded with -1), and per gate slot the strings it
    acts on with the window positions of its two qubits: a list of
    (slot, strings, position_a, position_b) in time order.
    """
    codes = np.asarray(codes)
    cones, steps = [], {}
    for s, row in enumerate(codes):
        active = set(np.flatnonzero(row).tolist())
        slots = []
        for slot, (a, b) in enumerate(np.asarray(gate_qubits).tolist()):
            if a in active or b in active:
                active.update((a, b))
                slots.append((slot, a, b))
        cone = sorted(active)
        cones.append(cone)
        where = {q: i for i, q in enumerate(cone)}
        for slot, a, b in slots:
            steps.setdefault(slot, []).append((s, where[a], where[b]))
    width = max((len(c) for c in cones), default=0)
    sites = np.full((len(codes), max(width, 1)), -1, dtype=np.int64)
    for s, cone in enumerate(cones):
        sites[s, :len(cone)] = cone
    gates = [(slot, *(np.array(col, dtype=np.int64) for col in zip(*steps[slot]))) for slot in sorted(steps)]
    return sites, gates


def snapshot_values_windows(codes: np.ndarray, basis: np.ndarray, gates: np.ndarray | None, gate_qubits,
                            setting_index: np.ndarray, outcomes: np.ndarray) -> np.ndarray:
    """<b|U P U^dag|b> of many strings, each propagated in full inside its light-cone window: (N, S) int8.

    The direct form of :func:`snapshot_values_many` (same arguments, same
    values): a table look-up per gate of every string's light cone, vectorised
    over settings and over the strings a gate touches; then a string is
    visible when every window site carries the measured Pauli or I, and its
    value is the sign times the parity of the outcome bits it covers
    (docs/design.md section 3). Strings go in batches so that the settings x
    strings x window temporaries stay small.
    """
    codes = np.asarray(codes, dtype=np.uint8)
    sites, steps = light_cone_windows(codes, gate_qubits if gates is not None else np.zeros((0, 2)))
    step = max(1, WINDOW_ENTRIES // max(max(len(basis), len(setting_index)) * sites.shape[1], 1))
    out = np.empty((len(setting_index), len(codes)), dtype=np.int8)
    for lo in range(0, len(codes), step):
        hi = min(lo + step, len(codes))
        batch = _steps_of(steps, lo, hi)
        win, sign = _propagate_windows(codes[lo:hi], sites[lo:hi], batch, gates, len(basis))
        where = np.where(sites[lo:hi] < 0, 0, sites[lo:hi])
        visible = np.all((win == 0) | (win == BASIS_PAULI[basis[:, where]]), axis=2)
        sign = np.where(visible, sign, 0).astype(np.int8)
        bits = outcomes[:, where] & (win != 0)[setting_index]  # (N, S, w); padding covers nothing
        parity = np.bitwise_xor.reduce(bits, axis=2)
        out[:, lo:hi] = sign[setting_index] * (1 - 2 * parity.astype(np.int8))
    return out


def _steps_of(steps, lo: int, hi: int):
    """The gate steps of strings lo..hi-1, renumbered from 0."""
    return [(slot, strings[keep] - lo, pa[keep], pb[keep]) for slot, strings, pa, pb in steps
            for keep in [(strings >= lo) & (strings < hi)] if keep.any()]


def _propagate_windows(codes, sites, steps, gates, n_settings: int):
    """U P U^dag of strings inside their windows, per setting: codes (K, S, w) and signs (K, S) int8."""
    where = np.where(sites < 0, 0, sites)
    window = np.where(sites < 0, 0, np.take_along_axis(codes, where, axis=1)).astype(np.uint8)
    win = np.broadcast_to(window, (n_settings,) + window.shape).copy()  # (K, S, w)
    sign = np.ones((n_settings, len(codes)), dtype=np.int8)
    if steps:
        table = clifford_table(2)
        for slot, strings, pa, pb in steps:
            pc = win[:, strings, pa] + 4 * win[:, strings, pb]
            g = gates[:, slot][:, None]
            new = table.conj_code[g, pc]
            sign[:, strings] *= table.conj_sign[g, pc]
            win[:, strings, pa] = new & 3
            win[:, strings, pb] = new >> 2
    return win, sign


@lru_cache(maxsize=16)
def _factor_windows(factor_bytes: bytes, n: int, gate_qubit_bytes: bytes):
    """light_cone_windows of one-site strings, kept across chunks (the layout repeats for every chunk)."""
    codes = _factor_codes(factor_bytes, n)
    return light_cone_windows(codes, np.frombuffer(gate_qubit_bytes, dtype=np.int64).reshape(-1, 2))


def _factor_codes(factor_bytes: bytes, n: int) -> np.ndarray:
    """One-site strings (F, n) from the bytes of (F, 2) int64 factors (qubit, code)."""
    factors = np.frombuffer(factor_bytes, dtype=np.int64).reshape(-1, 2)
    codes = np.zeros((len(factors), n), dtype=np.uint8)
    codes[np.arange(len(factors)), factors[:, 0]] = factors[:, 1]
    return codes


def one_site_images(factors: np.ndarray, n: int, gates: np.ndarray | None, gate_qubits):
    """U P U^dag of one-site Paulis P (factors (F, 2): qubit, code), as packed x and z bits and a sign.

    Returns x, z (W, F, K) uint64, word w holding qubits 64 w .. 64 w + 63
    (qubit q at bit q % 64, as hamiltonians.pauli.pack_bits), and the sign
    (F, K) int8. Without gates the image is P itself and K is 1. The last
    few results are kept (read-only), keyed by the full content of the
    arguments: the accumulators of one chunk ask for the same factors of the
    same settings several times (one-site columns, near pairs, energy terms).
    """
    factors = np.ascontiguousarray(factors, dtype=np.int64)
    if gates is None or gates.shape[1] == 0:
        return _pack_windows(factors[:, None, 0], factors[None, :, 1:2].astype(np.uint8), n) + (
            np.ones((len(factors), 1), dtype=np.int8),)
    gates = np.ascontiguousarray(gates)
    return _propagated_images(factors.tobytes(), n, np.ascontiguousarray(gate_qubits, dtype=np.int64).tobytes(),
                              gates.tobytes(), gates.dtype.str, gates.shape)


@lru_cache(maxsize=2)
def _propagated_images(factor_bytes, n, gate_qubit_bytes, gate_bytes, gate_dtype, gate_shape):
    """one_site_images with gates, from the bytes of its arguments (the cache key is their full content)."""
    sites, steps = _factor_windows(factor_bytes, n, gate_qubit_bytes)
    gates = np.frombuffer(gate_bytes, dtype=gate_dtype).reshape(gate_shape)
    codes = _factor_codes(factor_bytes, n)
    win, sign = _propagate_windows(codes, sites, steps, gates, len(gates))
    out = _pack_windows(sites, win, n) + (sign.T.copy(),)
    for a in out:
        a.flags.writeable = False
    return out


def _pack_windows(sites, win, n: int):
    """Window codes win (K, F, w) on qubits sites (F, w) (-1: padding) -> packed x, z bits (W, F, K) uint64."""
    words = max(1, -(-n // 64))
    x = np.zeros((words, win.shape[1], win.shape[0]), dtype=np.uint64)
    z = np.zeros_like(x)
    codes = win.transpose(2, 1, 0)  # (w, F, K)
    for j, column in enumerate(sites.T):  # one window position of every factor at a time
        shift = np.where(column < 0, 0, column % 64).astype(np.uint64)[:, None]
        xbit = (codes[j] & 1).astype(np.uint64) << shift  # padding carries code 0: no bit
        zbit = (codes[j] >> 1).astype(np.uint64) << shift
        if words == 1:
            x[0] |= xbit
            z[0] |= zbit
            continue
        word = np.where(column < 0, 0, column // 64)
        for w in np.unique(word):
            rows = word == w
            x[w, rows] |= xbit[rows]
            z[w, rows] |= zbit[rows]
    return x, z


def _popcount_mod4(words: np.ndarray) -> np.ndarray:
    """Number of set bits over the word axis (first), modulo 4, as uint8 (uint8 wraps at 256 = 0 mod 4)."""
    total = np.bitwise_count(words[0])
    for more in words[1:]:
        total += np.bitwise_count(more)
    return total


def image_product(x1, z1, y1, s1, x2, z2, y2, s2):
    """Product of two commuting Hermitian Paulis s P(x, z), packed with the word axis first.

    P(x1, z1) P(x2, z2) = i^k P(x1 ^ x2, z1 ^ z2) with k = y1 + y2 - y3 + 2 z1.x2
    (mod 4), y = popcount(x & z): the rule of hamiltonians.pauli.product_phase,
    with y carried along (mod 4, uint8) instead of recounted. Commuting
    factors give k = 0 or 2, a sign. Returns x3, z3, y3, s3.
    """
    x3, z3 = x1 ^ x2, z1 ^ z2
    y3 = _popcount_mod4(x3 & z3)
    k = (y1 + y2 - y3 + 2 * _popcount_mod4(z1 & x2)) & 3
    return x3, z3, y3, (s1 * s2 * (1 - k.astype(np.int8))).astype(np.int8)


def snapshot_values_many(codes: np.ndarray, basis: np.ndarray, gates: np.ndarray | None, gate_qubits,
                         setting_index: np.ndarray, outcomes: np.ndarray) -> np.ndarray:
    """<b|U P U^dag|b> of many strings at once for circuits of two-qubit gates then local bases: (N, S) int8.

    A string is the product of its one-site factors, so its image is the
    product of their images: U P_1 P_2 U^dag = (U P_1 U^dag)(U P_2 U^dag). Each
    distinct one-site factor is propagated once per setting (a table look-up
    per gate of its light cone) and packed into 64-bit words of x and z bits;
    a string's image is the product of its factors' images (:func:`image_product`).
    With the measured Pauli B of the setting, the string is visible when its
    image equals B on its support, and its value is the sign times
    (-1)^(outcome bits on the support) (docs/design.md section 3). basis (K, n)
    and gates (K, G) of the settings, setting_index (N,) positions in them,
    outcomes (N, n). Same values as :func:`snapshot_values_windows`.
    """
    codes = np.atleast_2d(np.asarray(codes, dtype=np.uint8))
    n = codes.shape[1]
    qubits = np.flatnonzero(codes.any(axis=0))  # the factors: X, Z, Y on every qubit some string acts on
    factors = np.stack([np.repeat(qubits, 3), np.tile(np.arange(1, 4), len(qubits))], axis=1)
    factor_of = np.zeros((n, 4), dtype=np.int64)
    factor_of[factors[:, 0], factors[:, 1]] = np.arange(len(factors))
    fx, fz, fsign = one_site_images(factors, n, gates, gate_qubits)
    fy = _popcount_mod4(fx & fz)
    measured = BASIS_PAULI[basis]
    bx, bz = pack_bits(measured & 1).T[:, None], pack_bits(measured >> 1).T[:, None]  # (W, 1, K)
    bits = pack_bits(outcomes).T[:, None]  # (W, 1, N)
    if len(setting_index) == len(basis) and np.array_equal(setting_index, np.arange(len(basis))):
        setting_index = slice(None)  # one snapshot per setting, in order: no gather
    out = np.empty((len(codes), len(outcomes)), dtype=np.int8)  # strings first: rows written whole
    weight = np.count_nonzero(codes, axis=1)
    out[weight == 0] = 1
    step = max(1, PACKED_ENTRIES // max(len(basis), len(outcomes)))
    for w in np.unique(weight[weight > 0]):
        rows = np.flatnonzero(weight == w)
        support = np.sort(np.argsort(codes[rows] == 0, axis=1, kind="stable")[:, :w], axis=1)
        factor = factor_of[support, np.take_along_axis(codes[rows], support, axis=1)]  # (S_w, w)
        for lo in range(0, len(rows), step):
            part = factor[lo:lo + step]
            f = part[:, 0]
            x, z, y, sign = fx[:, f], fz[:, f], fy[f], fsign[f]
            for j in range(1, w):  # factors on different qubits commute
                f = part[:, j]
                x, z, y, sign = image_product(x, z, y, sign, fx[:, f], fz[:, f], fy[f], fsign[f])
            out[rows[lo:lo + step]] = _measured_values(x, z, sign, bx, bz, bits, setting_index)
    return out.T  # (N, S) in Fortran order: a copy into C order would cost more than the values


def _measured_values(x, z, sign, bx, bz, bits, setting_index):
    """Values (S, N) of images x, z (W, S, K or 1) with signs (S, K or 1): zero unless the image is the
    measured Pauli (bx, bz (W, 1, K)) on its support, else sign (-1)^(outcome bits (W, 1, N) on the support)."""
    seen = x | z
    mismatch = ((x[0] ^ bx[0]) | (z[0] ^ bz[0])) & seen[0]
    for w in range(1, len(x)):
        mismatch |= ((x[w] ^ bx[w]) | (z[w] ^ bz[w])) & seen[w]
    sign = np.where(mismatch == 0, sign, 0).astype(np.int8)
    if seen.shape[2] > 1:  # one image per setting; the local ensemble has one for all
        seen = seen[:, :, setting_index]
    parity = _popcount_mod4(seen & bits) & 1
    return sign[:, setting_index] * (1 - 2 * parity.astype(np.int8))


def propagate_tableau(codes: np.ndarray, tableau_x, tableau_z, tableau_sign):
    """U P U^dagger for global Cliffords given by their tableaux.

    P = i^y prod_q X_q^x_q Z_q^z_q, so the image is i^y times the ordered
    product of the generator images. Returns x, z bits (K, n) and signs (K,).
    """
    codes = np.asarray(codes)
    k, _, n = tableau_x.shape
    px, pz = (codes & 1).astype(np.uint8), ((codes >> 1) & 1).astype(np.uint8)
    rx = np.zeros((k, n), dtype=np.uint8)
    rz = np.zeros((k, n), dtype=np.uint8)
    phase = np.full(k, int(np.sum(px & pz)) % 4, dtype=np.int64)
    sign = np.ones(k, dtype=np.int64)
    for q in range(n):
        for j, present in ((2 * q, px[q]), (2 * q + 1, pz[q])):
            if present:
                rx, rz, step = product_phase(rx, rz, tableau_x[:, j], tableau_z[:, j])
                phase += step
                sign *= tableau_sign[:, j]
    phase %= 4
    return rx, rz, (sign * np.where(phase == 2, -1, 1)).astype(np.int8)


def setting_factors(codes: np.ndarray, ensemble, settings):
    """Per setting: which qubits the measured Pauli covers, and its sign (see ``Ensemble.setting_factors``)."""
    return ensemble.setting_factors(codes, settings)


def snapshot_values(codes, ensemble, settings, setting_index, outcomes) -> np.ndarray:
    """<b|U P U^dagger|b> for every snapshot: (N,) int8 in {-1, 0, +1} (see ``Ensemble.snapshot_values``)."""
    return ensemble.snapshot_values(codes, settings, setting_index, outcomes)
