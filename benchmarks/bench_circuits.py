"""Cost per snapshot of estimating from circuit shadows vs local shadows.

Energy of a 64-site Heisenberg chain (terms XX, YY, ZZ on neighbours) and the
correlation maps (one-site X, Y, Z on every site, all 9 pairs of axes on
every pair; for circuits the pairs whose light cones overlap are propagated
explicitly), by ``manybody.estimation.driver.estimate`` on shadows of random
outcomes (timing only, as in bench_estimate.py): local ensemble vs a depth-3
brickwork ShallowEnsemble. Target: circuit cost within 5x the local cost
per snapshot. A second table times the propagation kernel alone
(one-site and near-pair strings of one chunk) against the string-by-string
loop over ``Ensemble.snapshot_values`` (timed on every 20th string, scaled)
and against the full propagation of every string in its light-cone window
(``snapshot_values_windows``, the kernel before products of one-site images).

    python benchmarks/bench_circuits.py [snapshots]
"""

import sys
import warnings

import numpy as np

warnings.filterwarnings("ignore")

from bench_estimate import random_shadow, timed  # noqa: E402  (benchmarks/ is on the path of a script)

from hamiltonians.spec import parse_spec  # noqa: E402
from manybody.estimation.driver import estimate  # noqa: E402
from manybody.estimation.setup import Chunk  # noqa: E402
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble  # noqa: E402
from manybody.measure.paulis import BASIS_PAULI, single_site_codes  # noqa: E402
from manybody.measure.propagation import snapshot_values_windows  # noqa: E402

N = 64
SPEC = f'[lattice]\nkind = "chain"\nsize = [{N}]\n[model]\nkind = "heisenberg"\nJ = 1.0\n'


def strings_of_chunk(n, near_pairs):
    """The Pauli strings a circuit chunk propagates for correlations: 3n one-site and 9 per near pair."""
    codes = [single_site_codes(q, a, n) for a in range(3) for q in range(n)]
    for qa, qb in near_pairs:
        for x in range(3):
            for y in range(3):
                c = np.zeros(n, np.uint8)
                c[qa], c[qb] = BASIS_PAULI[x], BASIS_PAULI[y]
                codes.append(c)
    return np.array(codes, dtype=np.uint8)


def main():
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 20000
    model = parse_spec(SPEC, "heisenberg.toml").build()
    rng = np.random.default_rng(0)
    local = LocalEnsemble(N)
    shallow = ShallowEnsemble(N, 3, np.array([(i, i + 1) for i in range(N - 1)]))
    print(f"estimate energy + correlations, {N}-site chain, {count:,} snapshots of random outcomes")
    print(f"{'ensemble':<28}{'total [s]':>10}{'per snapshot [us]':>19}{'vs local':>10}")
    per = {}
    for name, ens in (("local", local), ("shallow depth 3", shallow)):
        shadow = random_shadow(ens, count, rng)
        _, t = timed(estimate, shadow, model, quantities=("energy", "correlations"), mutual_information=False)
        per[name] = t / count
        print(f"{name:<28}{t:>10.2f}{1e6 * t / count:>19.1f}{per[name] / per['local']:>10.1f}")

    # the kernel alone: one chunk's one-site and near-pair strings
    from manybody.estimation.driver import _setup

    shadow = random_shadow(shallow, 8192, rng)
    setup, _ = _setup(shadow, model, [], None, 20, 8192)
    chunk = Chunk(setup, shadow.record_setting, shadow.outcomes)
    codes = strings_of_chunk(N, setup.near_pairs)
    ours, t_ours = timed(shallow.snapshot_values_many, codes, chunk.settings, chunk.where, chunk.bits)
    sub = codes[::20]
    base, t_base = timed(lambda: np.stack([shallow.snapshot_values(c, chunk.settings, chunk.where, chunk.bits)
                                           for c in sub], axis=1))
    assert np.array_equal(ours[:, ::20], base)
    t_base *= len(codes) / len(sub)
    direct, t_direct = timed(snapshot_values_windows, codes, chunk.settings.basis, chunk.settings.gates,
                             shallow.gate_qubits, chunk.where, chunk.bits)
    assert np.array_equal(ours, direct)
    print(f"\nkernel: {len(codes)} strings x 8,192 snapshots (depth 3)")
    print(f"{'snapshot_values_many vs':<28}{'ours [s]':>10}{'baseline [s]':>19}{'ratio':>10}")
    print(f"{'  string loop':<28}{t_ours:>10.2f}{t_base:>19.2f}{t_base / t_ours:>10.1f}")
    print(f"{'  window propagation':<28}{t_ours:>10.2f}{t_direct:>19.2f}{t_direct / t_ours:>10.1f}")


if __name__ == "__main__":
    main()
