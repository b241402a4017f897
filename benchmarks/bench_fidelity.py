"""Fidelity to a target state from classical shadows: time per snapshot.

1. Local snapshots, 40-site MPS target of bond dimension 32: ours (transfer
   matrices batched over snapshots) against a straightforward per-snapshot
   quimb contraction (apply the 40 one-site operators to a copy of the MPS,
   then the overlap), timed on a subset.
2. Shallow depth-3 brickwork snapshots, exact: ours (two Walsh-Hadamard
   transforms per setting) against a straightforward enumeration of the 2^n
   stabilizers U^dag Z^z U of every snapshot as dense operators (small n only),
   then ours alone at the largest n it handles here.

Run: python benchmarks/bench_fidelity.py [--quick]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import quimb.tensor as qtn

from manybody.estimation import fidelity as fid
from manybody.measure.clifford import clifford_table
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.simulation.sampling import index_bits, sample_dense, sample_mps
from manybody.simulation.statevector import BASIS_ROTATIONS, embed


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def baseline_local_mps(mps, basis, bits):
    """Per snapshot: quimb applies O_q = 3|v><v| - I site by site to a copy, then <psi|phi>."""
    ops = fid.local_operators(basis, bits)
    out = []
    for row in ops:
        phi = mps.copy()
        for q in range(mps.L):
            phi.gate_(row[q], q, contract=True)
        out.append((mps.H @ phi).real)
    return np.array(out)


def bench_mps(n_snapshots):
    n, chi = 40, 32
    mps = qtn.MPS_rand_state(n, chi, dtype=complex, seed=0)
    mps /= mps.norm()
    ens = LocalEnsemble(n)
    rng = np.random.default_rng(1)
    settings = ens.draw(n_snapshots, rng)
    bits, _ = sample_mps(mps, ens, settings, 1, rng)
    ours, t_ours = timed(lambda: fid.local_fidelity_mps(mps, settings.basis, bits))
    sub = min(100, n_snapshots)
    base, t_base = timed(lambda: baseline_local_mps(mps, settings.basis[:sub], bits[:sub]))
    assert np.allclose(base, ours[:sub], atol=1e-8 * np.abs(ours[:sub]).max())
    per_ours, per_base = t_ours / n_snapshots, t_base / sub
    print(f"| local, MPS n={n} chi={chi}, {n_snapshots} snapshots | {1e3 * per_ours:9.3f} ms | "
          f"{1e3 * per_base:9.3f} ms ({sub} snapshots) | {per_base / per_ours:7.1f} |")
    print(f"  estimate F = {ours.mean():.3f} +- {ours.std(ddof=1) / np.sqrt(n_snapshots):.3f} (target 1)")


def dense_unitary(ens, settings, k):
    """U of shallow setting k as a dense matrix: gates of the Clifford table, then basis rotations."""
    n = ens.n_qubits
    u = np.eye(2**n, dtype=complex)
    for slot, (a, b) in enumerate(ens.gate_qubits.tolist()):
        u = embed(clifford_table(2).unitaries[settings.gates[k, slot]], [a, b], n) @ u
    for q in range(n):
        u = embed(BASIS_ROTATIONS[settings.basis[k, q]], [q], n) @ u
    return u


def baseline_shallow(psi, ens, settings, pos, bits):
    """Per snapshot: rho_i's stabilizers U^dag Z^z U as dense matrices, 2^-n sum tr(S rho) <S>/lambda."""
    n = ens.n_qubits
    z_op = np.diag([1.0, -1.0])
    supports = fid.stabilizer_supports(ens, settings)  # lambda per stabilizer (same table as ours)
    inv = fid.inverse_eigenvalue_table(ens, supports)
    out = []
    for k, b in zip(pos, bits):
        u = dense_unitary(ens, settings, k)
        total = 0.0
        for z, zb in enumerate(index_bits(np.arange(2**n), n)):
            zz = np.ones((1, 1))
            for q in range(n):
                zz = np.kron(zz, z_op if zb[q] else np.eye(2))
            s = u.conj().T @ zz @ u
            total += (-1) ** int(zb @ b) * np.vdot(psi, s @ psi).real * inv[k, z]
        out.append(total / 2**n)
    return np.array(out)


def bench_shallow(n, n_snapshots, baseline=0):
    ens = ShallowEnsemble(n, 3, [(i, i + 1) for i in range(n - 1)])
    rng = np.random.default_rng(2)
    psi = np.zeros(2**n, dtype=complex)
    psi[0] = psi[-1] = 2**-0.5  # GHZ
    settings = ens.draw(n_snapshots, rng)
    bits = sample_dense(psi, ens, settings, 1, rng)
    pos = np.arange(n_snapshots)
    _, t_table = timed(lambda: fid.inverse_eigenvalue_table(ens, np.arange(2**n)))
    ours, t_ours = timed(lambda: fid.shallow_fidelity(psi, ens, settings, pos, bits))
    per_ours = t_ours / n_snapshots
    if baseline:
        base, t_base = timed(lambda: baseline_shallow(psi, ens, settings, pos[:baseline], bits[:baseline]))
        assert np.allclose(base, ours[:baseline], atol=1e-8)
        per_base = t_base / baseline
        right = f"{1e3 * per_base:9.3f} ms ({baseline} snapshots) | {per_base / per_ours:7.1f} |"
    else:
        right = "        (too slow) |         |"
    print(f"| shallow d=3, GHZ n={n}, {n_snapshots} snapshots | {1e3 * per_ours:9.3f} ms | {right}")
    print(f"  estimate F = {ours.mean():.3f} +- {ours.std(ddof=1) / np.sqrt(n_snapshots):.3f} (target 1); "
          f"1/lambda table of all 2^{n} supports from ensemble.eigenvalue: {t_table:.1f} s, once per ensemble")


def main():
    quick = "--quick" in sys.argv
    print("| case | ours per snapshot | baseline per snapshot | ratio |")
    print("|---|---|---|---|")
    bench_mps(1000 if quick else 10000)
    bench_shallow(6, 2000, baseline=10)
    bench_shallow(12 if quick else 14, 500 if quick else 2000)


if __name__ == "__main__":
    main()
