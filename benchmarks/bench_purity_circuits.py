"""Purity of a large subsystem from shallow-circuit snapshots, through stabilizer groups.

32-qubit chain, depth-3 brickwork of random two-qubit Cliffords, 1000 settings
x 100 shots = 10^5 snapshots. The outcome bits are uniformly random: only the
cost is measured here (they are not the snapshots of any state, so the printed
purities mean nothing). Rows:

- |A| = 12 (qubits 10..21): manybody.estimation.stabilizer, the purity of A
  and of all its 4096 subsystems from one Pauli vector; the channel
  eigenvalues of all support patterns are timed apart (ShallowEnsemble's
  light-cone contraction, one per shape).
- |A| = 6 (qubits 13..18): the same kernel against the straightforward
  baseline, the 4^|A| enumeration of snapshot values
  (Ensemble.snapshot_values of every Pauli on A, one column per Pauli, as in
  the enumeration branch of manybody.estimation.purity), on the same snapshots.

Peak memory is the process high-water mark (VmHWM) after each row.

    python benchmarks/bench_purity_circuits.py
"""

import time

import numpy as np

from manybody.estimation.stabilizer import (
    pauli_vector_sums,
    subsystem_purities,
    support_eigenvalues,
)
from manybody.measure.ensembles import ShallowEnsemble
from manybody.measure.paulis import paulis_on

N_QUBITS, DEPTH, SETTINGS, SHOTS = 32, 3, 1000, 100


def peak_memory_mib() -> float:
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    return float("nan")


def ours(ens, settings, pos, bits, qubits):
    t0 = time.perf_counter()
    table = support_eigenvalues(ens.eigenvalue, ens.n_qubits, qubits)
    t1 = time.perf_counter()
    sums = pauli_vector_sums(ens, settings, pos, bits, None, qubits, table)
    purities = subsystem_purities(sums)
    t2 = time.perf_counter()
    return purities, t1 - t0, t2 - t1


def enumeration(ens, settings, pos, bits, qubits):
    """4^|A| columns v_i(P) = <b|U P U^dag|b> / lambda_P; within-setting sums subtracted (several shots)."""
    t0 = time.perf_counter()
    codes = paulis_on(qubits, ens.n_qubits)
    big_v = np.zeros(len(codes))
    within = 0.0
    for r, code in enumerate(codes):
        v = ens.snapshot_values(code, settings, pos, bits) / ens.eigenvalue(code != 0) if r else np.ones(len(pos))
        big_v[r] = v.sum()
        per_setting = np.bincount(pos, weights=v, minlength=len(settings))
        within += per_setting @ per_setting
    shots = np.bincount(pos, minlength=len(settings)).astype(float)
    purity = (big_v @ big_v - within) / (2 ** len(qubits) * (len(pos) ** 2 - shots @ shots))
    return purity, time.perf_counter() - t0


def main():
    rng = np.random.default_rng(2026)
    ens = ShallowEnsemble(N_QUBITS, DEPTH, np.array([(i, i + 1) for i in range(N_QUBITS - 1)]))
    settings = ens.draw(SETTINGS, rng)
    pos = np.repeat(np.arange(SETTINGS), SHOTS)
    bits = rng.integers(0, 2, size=(len(pos), N_QUBITS), dtype=np.uint8)  # cost only: random outcomes
    print(f"{N_QUBITS} qubits, depth {DEPTH}, {SETTINGS} settings x {SHOTS} shots = {len(pos)} snapshots "
          f"(random outcome bits: timing only)")
    print(f"{'|A|':>4}{'method':>14}{'eigenvalues [s]':>17}{'sums [s]':>10}{'total [s]':>11}{'ratio':>8}"
          f"{'peak MiB':>10}")
    big = np.arange(10, 22)
    _, t_lam, t_sums = ours(ens, settings, pos, bits, big)
    print(f"{len(big):>4}{'stabilizer':>14}{t_lam:>17.2f}{t_sums:>10.2f}{t_lam + t_sums:>11.2f}{'':>8}"
          f"{peak_memory_mib():>10.0f}")
    small = np.arange(13, 19)
    p_ours, t_lam, t_sums = ours(ens, settings, pos, bits, small)
    mem_ours = peak_memory_mib()
    p_enum, t_enum = enumeration(ens, settings, pos, bits, small)
    ratio = t_enum / (t_lam + t_sums)
    print(f"{len(small):>4}{'stabilizer':>14}{t_lam:>17.2f}{t_sums:>10.2f}{t_lam + t_sums:>11.2f}{'':>8}"
          f"{mem_ours:>10.0f}")
    print(f"{len(small):>4}{'enumeration':>14}{'':>17}{'':>10}{t_enum:>11.2f}{ratio:>8.1f}{peak_memory_mib():>10.0f}")
    print(f"same purity of the 6 qubits: {p_ours[-1]:.6g} (stabilizer) vs {p_enum:.6g} (enumeration)")


if __name__ == "__main__":
    main()
