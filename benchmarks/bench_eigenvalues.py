"""Shallow-circuit eigenvalues on a 128-qubit chain.

For depths 1..8: lambda_P of every Pauli support of weight <= 2 within
distance 8 (one- and two-site supports), first call and repeated call (served
from the cache of light-cone shapes). The baseline column is the same count
of exact contractions without the cache (estimated from the mean time of the
uncached shapes), so the ratio shows what the cache saves.

    python benchmarks/bench_eigenvalues.py
"""

import time

import numpy as np

from manybody.measure.ensembles import ShallowEnsemble

N, REACH = 128, 8


def supports():
    for i in range(N):
        yield (i,)
        for r in range(1, REACH + 1):
            if i + r < N:
                yield (i, i + r)


def main():
    edges = np.array([(i, i + 1) for i in range(N - 1)])
    count = sum(1 for _ in supports())
    print(f"{count} supports (each stands for 3 or 9 Paulis of the same lambda)")
    print(f"{'depth':>5}{'shapes':>8}{'first [s]':>11}{'repeat [s]':>12}{'no cache [s]':>14}{'ratio':>8}")
    for depth in range(1, 9):
        ens = ShallowEnsemble(N, depth, edges)
        t = time.perf_counter()
        for s in supports():
            ens.eigenvalue(s)
        first = time.perf_counter() - t
        t = time.perf_counter()
        for s in supports():
            ens.eigenvalue(s)
        repeat = time.perf_counter() - t
        shapes = len(ens._cache)
        no_cache = first / shapes * count
        print(f"{depth:>5}{shapes:>8}{first:>11.2f}{repeat:>12.3f}{no_cache:>14.1f}{no_cache / first:>8.1f}")


if __name__ == "__main__":
    main()
