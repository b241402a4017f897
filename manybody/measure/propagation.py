"""Pauli propagation: the snapshot values <b|U P U^dagger|b> in {-1, 0, +1}.

With Clifford U, U P U^dagger = s Q for a Pauli Q; the value is s (-1)^(sum
of outcome bits on the support of Q) when Q is Z-type after the final basis
rotation, and 0 otherwise (docs/design.md section 3). Propagation runs once per
setting (a table look-up per gate in the light cone, vectorised over all
settings); the outcome bits then give every snapshot's value.

Pauli strings here are one-qubit codes per qubit: 0 I, 1 X, 2 Z, 3 Y.
"""

from __future__ import annotations

import numpy as np

from hamiltonians.pauli import product_phase
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


#: settings x strings x qubits handled at once by snapshot_values_many (bounds its temporaries)
WINDOW_ENTRIES = 1 << 24


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


def snapshot_values_many(codes: np.ndarray, basis: np.ndarray, gates: np.ndarray | None, gate_qubits,
                         setting_index: np.ndarray, outcomes: np.ndarray) -> np.ndarray:
    """<b|U P U^dag|b> of many strings at once for circuits of two-qubit gates then local bases: (N, S) int8.

    Each string is propagated inside its own light-cone window (a table look-up
    per gate, vectorised over settings and over the strings a gate touches);
    then it is visible when every window site carries the measured Pauli or I,
    and its value is the sign times the parity of the outcome bits it covers
    (docs/design.md section 3). basis (K, n) and gates (K, G) of the settings,
    setting_index (N,) positions in them, outcomes (N, n). Strings go in
    batches so that the settings x strings x window temporaries stay small.
    """
    codes = np.asarray(codes, dtype=np.uint8)
    sites, steps = light_cone_windows(codes, gate_qubits if gates is not None else np.zeros((0, 2)))
    step = max(1, WINDOW_ENTRIES // max(max(len(basis), len(setting_index)) * sites.shape[1], 1))
    out = np.empty((len(setting_index), len(codes)), dtype=np.int8)
    for lo in range(0, len(codes), step):
        hi = min(lo + step, len(codes))
        batch = [(slot, strings[keep] - lo, pa[keep], pb[keep]) for slot, strings, pa, pb in steps
                 for keep in [(strings >= lo) & (strings < hi)] if keep.any()]
        out[:, lo:hi] = _window_values(codes[lo:hi], sites[lo:hi], batch, basis, gates, setting_index, outcomes)
    return out


def _window_values(codes, sites, steps, basis, gates, setting_index, outcomes):
    pad = sites < 0
    where = np.where(pad, 0, sites)
    window = np.where(pad, 0, np.take_along_axis(codes, where, axis=1)).astype(np.uint8)
    win = np.broadcast_to(window, (len(basis),) + window.shape).copy()  # (K, S, w)
    sign = np.ones((len(basis), len(codes)), dtype=np.int8)
    if steps:
        table = clifford_table(2)
        for slot, strings, pa, pb in steps:
            pc = win[:, strings, pa] + 4 * win[:, strings, pb]
            g = gates[:, slot][:, None]
            new = table.conj_code[g, pc]
            sign[:, strings] *= table.conj_sign[g, pc]
            win[:, strings, pa] = new & 3
            win[:, strings, pb] = new >> 2
    visible = np.all((win == 0) | (win == BASIS_PAULI[basis[:, where]]), axis=2)
    sign = np.where(visible, sign, 0).astype(np.int8)
    bits = outcomes[:, where] & (win != 0)[setting_index]  # (N, S, w); padding covers nothing
    parity = np.bitwise_xor.reduce(bits, axis=2)
    return sign[setting_index] * (1 - 2 * parity.astype(np.int8))


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
