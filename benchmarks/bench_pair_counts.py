"""Pair-count purities of large local subsystems: ours vs the power formula per pair.

Ours: manybody.estimation.kernels.pair_count_sum (one matrix product per chunk
gives (k + 1) a + (a + b) per pair, the kernel is looked up in a table, the
rows sorted by setting so that same-setting pairs are diagonal blocks).
Baseline: the same matrix products for a and the same-basis count, then
x^a y^b (1/2)^c evaluated with three powers per pair and the same-setting
pairs masked by comparing labels (the form used before). Random words of
k sites, settings of 10 shots, 20 blocks; both give the same numbers.

    python benchmarks/bench_pair_counts.py [--quick]
"""

import sys
import time

import numpy as np

from manybody.estimation.kernels import pair_count_sum


def baseline(w, inv, setting, blocks, n_blocks, chunk=2048):
    n_snap, k = w.shape
    s = inv**2
    same_out = np.zeros((n_snap, 6 * k))
    same_out[np.arange(n_snap)[:, None], 6 * np.arange(k) + w] = 1.0
    basis = np.zeros((n_snap, 3 * k))
    basis[np.arange(n_snap)[:, None], 3 * np.arange(k) + w // 2] = 1.0
    onehot = np.zeros((n_snap, n_blocks))
    onehot[np.arange(n_snap), blocks] = 1.0
    out = np.zeros((n_blocks, n_blocks))
    for start in range(0, n_snap, chunk):
        rows = np.arange(start, min(start + chunk, n_snap))
        a = same_out[rows] @ same_out.T
        same_basis = basis[rows] @ basis.T
        term = ((1 + s) / 2) ** a * ((1 - s) / 2) ** (same_basis - a) * 0.5 ** (k - same_basis)
        term[np.arange(len(rows)), rows] = 0.0
        term[setting[rows][:, None] == setting[None, :]] = 0.0
        out += onehot[rows].T @ (term @ onehot)
    return out


def main(quick: bool):
    rng = np.random.default_rng(0)
    print(f"{'N':>7} {'k':>3} {'ours s':>8} {'baseline s':>11} {'ratio':>6} {'ns/pair':>8} {'max rel diff':>13}")
    for n_snap, k in ([(4000, 9)] if quick else [(8000, 9), (8000, 16), (20000, 12)]):
        w = rng.integers(0, 6, size=(n_snap, k))
        setting = rng.permutation(np.repeat(np.arange(n_snap // 10), 10))
        blocks = rng.integers(0, 20, n_snap)
        start = time.perf_counter()
        ours = pair_count_sum(w, 3.0, exclude=setting, blocks=blocks, n_blocks=20)
        t_ours = time.perf_counter() - start
        start = time.perf_counter()
        base = baseline(w, 3.0, setting, blocks, 20)
        t_base = time.perf_counter() - start
        diff = np.max(np.abs(ours - base)) / np.max(np.abs(base))
        print(f"{n_snap:>7} {k:>3} {t_ours:>8.2f} {t_base:>11.2f} {t_base / t_ours:>6.1f} "
              f"{1e9 * t_ours / n_snap**2:>8.1f} {diff:>13.1e}")


if __name__ == "__main__":
    main("--quick" in sys.argv)
