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
