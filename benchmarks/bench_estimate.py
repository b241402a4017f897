"""Estimator speed and memory (local and shallow shadows of random outcomes: timing only).

1. Full 3x3 correlation tensor, 100 sites, 10^6 local snapshots: ours (estimate, no
   mutual information) vs a Python loop over site pairs with numpy per pair (timed on
   300 pairs, scaled) and vs the bare matrix product E^T E of the same shapes.
   Targets: >= 50x the loop, <= 3x the bare product. Also the check for entries no
   setting measured (Gram of the settings' one-hot bases, stopping once all are seen)
   vs the same counts from a Gram over all snapshots.
2. Purity of a 10-site subsystem from 10^5 snapshots: histogram vs the direct O(N^2)
   pair sum (timed on 4000 snapshots, scaled by N^2); both on the same 4000 snapshots
   must agree to 1e-10. Target >= 100x.
3. Mutual-information map of a 64-site chain from 10^5 snapshots: ours vs two-site
   purities one pair at a time by the direct pair sum (3 pairs on 2000 snapshots, scaled).
4. Nearest-neighbour XX, YY, ZZ on a 64-site chain, depth 4, 10^5 shallow snapshots:
   ours (per-setting propagation, vectorised) vs per-snapshot propagation in Python
   (timed on 200 snapshots, scaled).
5. Peak memory of `manybody estimate` on a 16-qubit shadow file of 10^5 and 10^6 snapshots.

    python benchmarks/bench_estimate.py [--skip-memory]
"""

import os
import subprocess
import sys
import tempfile
import time
import warnings

import numpy as np

warnings.filterwarnings("ignore")

from manybody.estimation.accumulators.correlations import measured_local  # noqa: E402
from manybody.estimation.driver import estimate  # noqa: E402
from manybody.estimation.kernels import (  # noqa: E402
    histogram_index,
    histogram_pair_sum,
    local_columns,
    pair_count_sum,
    site_factor_matrix,
    words,
)
from manybody.io.shadow import Shadow, ShadowWriter  # noqa: E402
from manybody.measure.clifford import clifford_table  # noqa: E402
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble  # noqa: E402
from manybody.measure.propagation import snapshot_values  # noqa: E402


def random_shadow(ens, n_snapshots, rng):
    settings = ens.draw(n_snapshots, rng)
    bits = rng.integers(0, 2, (n_snapshots, ens.n_qubits), dtype=np.uint8)
    return Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(ens.n_qubits),
                  record_setting=settings.ids, outcomes=bits, counts=np.ones(n_snapshots, np.int64))


def timed(fn, *a, **k):
    t = time.perf_counter()
    out = fn(*a, **k)
    return out, time.perf_counter() - t


def row(name, ours, base, extra=""):
    print(f"{name:<44}{ours:>10.2f}{base:>14.4g}{base / ours:>11.4g}  {extra}")


def direct_pair_sum(w):
    """The straightforward double loop over snapshot pairs (numpy per row)."""
    f = site_factor_matrix(3.0)
    total = 0.0
    for i in range(len(w)):
        total += np.prod(f[w[i][None, :], w], axis=1).sum() - np.prod(f[w[i], w[i]])
    return total


def main():
    rng = np.random.default_rng(0)
    print(f"{'case':<44}{'ours [s]':>10}{'baseline [s]':>14}{'ratio':>11}")

    # 1. correlation tensor
    n, big = 100, 1_000_000
    shadow = random_shadow(LocalEnsemble(n), big, rng)
    _, t_ours = timed(estimate, shadow, None, [], mutual_information=False, chunk=1 << 15)
    cols = local_columns(shadow.settings.basis, shadow.outcomes, 3.0).reshape(big, -1)
    _, t_bare = timed(lambda: cols.T @ cols)
    pairs = [(a, b) for a in range(n) for b in range(a + 1, n)][:300]
    e = cols.reshape(big, 3, n)

    def loop():
        for a, b in pairs:
            for x in range(3):
                for y in range(3):
                    np.dot(e[:, x, a], e[:, y, b])
    _, t_loop = timed(loop)
    t_loop *= (n * (n - 1) / 2) / len(pairs)
    row("correlations 100 sites, 1e6 snapshots: loop", t_ours, t_loop)
    row("   vs bare matrix product E^T E", t_ours, t_bare, "(ratio < 1: ours is slower)")
    seen, t_seen = timed(measured_local, shadow.settings.basis, np.ones(big, bool), n)
    nonzero = (cols != 0).astype(np.float32)
    counts, t_counts = timed(lambda: nonzero.T @ nonzero)
    assert np.array_equal(seen, counts > 0)
    row("   unmeasured-entry check vs snapshot Gram", t_seen, t_counts)
    del nonzero, counts
    del shadow, cols, e

    # 2. purity of 10 sites
    n, mid = 16, 100_000
    shadow = random_shadow(LocalEnsemble(n), mid, rng)
    qs = list(range(10))
    w = words(shadow.settings.basis[:, qs], shadow.outcomes[:, qs])
    _, t_hist = timed(lambda: histogram_pair_sum(np.bincount(histogram_index(w), minlength=6**10).astype(float),
                                                 [site_factor_matrix(3.0)] * 10))
    sub = w[:4000]
    direct, t_direct = timed(direct_pair_sum, sub)
    t_direct *= (mid / len(sub)) ** 2
    hist_sub = histogram_pair_sum(np.bincount(histogram_index(sub), minlength=6**10).astype(float),
                                  [site_factor_matrix(3.0)] * 10) - len(sub) * 5.0**10
    agree = abs(hist_sub - direct) / abs(direct)
    row("purity 10 sites, 1e5 snapshots", t_hist, t_direct, f"relative difference {agree:.1e}")

    # 3. mutual information map, 64 sites
    n = 64
    shadow = random_shadow(LocalEnsemble(n), mid, rng)
    _, t_mi = timed(estimate, shadow, None, [], correlations=False)
    sub = words(shadow.settings.basis[:2000], shadow.outcomes[:2000])
    _, t_pairs = timed(lambda: [pair_count_sum(sub[:, [a, a + 1]], 3.0) for a in range(3)])
    t_pairs *= (n * (n - 1) / 2) / 3 * (mid / 2000) ** 2
    row("mutual information map 64 sites, 1e5", t_mi, t_pairs)

    # 4. shallow nearest-neighbour correlations
    ens = ShallowEnsemble(n, 4, np.array([(i, i + 1) for i in range(n - 1)]))
    shadow = random_shadow(ens, mid, rng)
    terms = []
    for q in range(n - 1):
        for code in (1, 3, 2):
            c = np.zeros(n, np.uint8)
            c[[q, q + 1]] = code
            terms.append(c)
    idx = np.arange(mid)
    _, t_ours = timed(lambda: [snapshot_values(c, ens, shadow.settings, idx, shadow.outcomes) for c in terms])
    table = clifford_table(2)
    gq = ens.gate_qubits.tolist()

    def per_snapshot(count):
        for s in range(count):
            for c in terms:
                codes = c.copy()
                sign = 1
                for slot, (a, b) in enumerate(gq):
                    if codes[a] or codes[b]:
                        g = shadow.settings.gates[s, slot]
                        pc = codes[a] + 4 * codes[b]
                        new = table.conj_code[g, pc]
                        sign *= table.conj_sign[g, pc]
                        codes[a], codes[b] = new & 3, new >> 2
    _, t_loop = timed(per_snapshot, 200)
    t_loop *= mid / 200
    row("shallow depth 4, 64 sites, NN XX/YY/ZZ, 1e5", t_ours, t_loop)

    # 5. peak memory from files
    if "--skip-memory" not in sys.argv:
        with tempfile.TemporaryDirectory() as tmp:
            for count in (100_000, 1_000_000):
                path = os.path.join(tmp, f"s{count}.nc")
                ens = LocalEnsemble(16)
                settings = ens.draw(count, rng)
                with ShadowWriter(path) as out:
                    for start in range(0, count, 1 << 16):
                        stop = min(count, start + (1 << 16))
                        out.append(settings.ids[start:stop], rng.integers(0, 2, (stop - start, 16), dtype=np.uint8),
                                   np.ones(stop - start, np.int64))
                    out.finish(Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(16)))
                # VmHWM of the child itself (ru_maxrss would carry the parent's size across fork)
                code = ("import sys; from manybody.cli.parser import main; main(['estimate', sys.argv[1], "
                        "'--subsystems', '0-3', '-o', sys.argv[2]]); "
                        "print([l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1])")
                out = subprocess.run([sys.executable, "-c", code, path, os.path.join(tmp, "r.nc")],
                                     capture_output=True, text=True, check=True)
                peak = int(out.stdout.strip().splitlines()[-1]) / 1024
                print(f"peak memory of estimate, {count:>9,} snapshots of 16 qubits: {peak:,.0f} MiB")


if __name__ == "__main__":
    main()
