"""Sparse Hamiltonian matrices: ours vs openfermion's get_sparse_operator.

Prints a table: time of ours (best of 3), time of the baseline (once), their
ratio, and our peak memory (tracemalloc, a separate run) relative to the
size of the resulting CSR matrix. Targets: ratio >= 10, peak / CSR <= 2.
The square of a TFIM Hamiltonian has many rows where terms cancel exactly.
Also times building the PauliExpansion of a 20x20 square-lattice J1-J2 model.

    python benchmarks/bench_sparse.py
"""

import time
import tracemalloc

from openfermion import get_sparse_operator

from hamiltonians import build_lattice
from hamiltonians.models import heisenberg, j1j2, tfim


def csr_bytes(mat):
    return mat.data.nbytes + mat.indices.nbytes + mat.indptr.nbytes


def timed(fn):
    t = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t


def main():
    ising = tfim(build_lattice("chain", 12, boundary="periodic"), J=-1.0, h=0.7)
    cases = [("TFIM chain, 20 sites", tfim(build_lattice("chain", 20), J=1.0, h=1.0)),
             ("Heisenberg chain, 16 sites", heisenberg(build_lattice("chain", 16))),
             # many exact cancellations on the diagonal: what a two-pass count once got wrong
             ("TFIM H^2, 12 sites", (ising * ising).combined())]
    print(f"{'matrix':<28}{'ours [s]':>10}{'openfermion [s]':>17}{'ratio':>8}{'peak / CSR':>12}")
    for name, ham in cases:
        t_ours = min(timed(ham.to_sparse)[1] for _ in range(3))  # best of 3, untraced
        tracemalloc.start()
        mat = ham.to_sparse()
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        op = ham.to_qubit_operator()
        ref, t_ref = timed(lambda: get_sparse_operator(op, n_qubits=ham.n_qubits))
        assert abs(mat - ref).max() < 1e-9, "matrices differ"
        print(f"{name:<28}{t_ours:>10.2f}{t_ref:>17.2f}{t_ref / t_ours:>8.1f}{peak / csr_bytes(mat):>12.2f}")

    lat = build_lattice("square", [20, 20])
    ham, t = timed(lambda: j1j2(lat, J1=1.0, J2=0.5).simplify())
    print(f"\nPauliExpansion of J1-J2 on a 20x20 square lattice: {len(ham)} terms in {t:.3f} s")


if __name__ == "__main__":
    main()
