"""Snapshot sampling speed.

1. Local-basis snapshots of a 32-site Heisenberg ground state (DMRG, bond
   dimension 64): ours (all snapshots advanced together site by site) vs a
   per-snapshot loop over quimb's own MPS sampling (rotate a copy of the MPS
   to the snapshot's bases, then MatrixProductState.sample(1)), the loop
   timed on 200 snapshots and scaled. Targets: ratio >= 20, >= 1e4 snapshots/s.
2. Shallow depth-2 snapshots of the same state: ours vs a per-snapshot
   circuit application (gates on a copy of the MPS, then quimb sampling),
   with 1 and 100 shots per setting; the largest discarded weight is shown.
3. Dense 12-qubit local snapshots of a TFIM ground state.
4. 10^6 local snapshots of a random 100-site MPS of bond dimension 32
   (quimb MPS_rand_state), drawn in chunks of settings by a pool of threads
   (workers = number of cores) vs the serial loop (workers = 1; both with
   BLAS on one thread, as simulate runs them), each timed on 10^5
   snapshots and scaled to 10^6. Target: under 5 minutes on 2 cores.

    python benchmarks/bench_sampling.py
"""

import time
import warnings

import numpy as np
import quimb.tensor as qtn

warnings.filterwarnings("ignore")

from hamiltonians import build_lattice  # noqa: E402
from hamiltonians.models import heisenberg, tfim  # noqa: E402
from manybody.measure.clifford import clifford_table  # noqa: E402
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble  # noqa: E402
from manybody.references import exact  # noqa: E402
from manybody.simulation.experiment import _records  # noqa: E402
from manybody.simulation.noise import Noise  # noqa: E402
from manybody.simulation.sampling import sample_dense, sample_mps  # noqa: E402
from manybody.simulation.statevector import BASIS_ROTATIONS  # noqa: E402
from manybody.threads import available_cores  # noqa: E402


def quimb_loop(mps, ensemble, settings, count, rng):
    table = clifford_table(2)
    for k in range(count):
        m = mps.copy()
        if ensemble.kind == "shallow":
            for slot, (a, b) in enumerate(ensemble.gate_qubits.tolist()):
                m.gate_(table.unitaries[settings.gates[k, slot]], (a, b), contract="swap+split", max_bond=64)
        for q in range(m.L):
            m.gate_(BASIS_ROTATIONS[settings.basis[k, q]], q, contract=True)
        next(m.sample(1, seed=rng))


def timed(fn, *args):
    t = time.perf_counter()
    out = fn(*args)
    return out, time.perf_counter() - t


def main():
    n = 32
    _, mps = exact.ground_state_mps(heisenberg(build_lattice("chain", n)), bond_dims=(16, 32, 64), tol=1e-6)
    rng = np.random.default_rng(0)
    print(f"{'case':<38}{'ours [1/s]':>12}{'baseline [1/s]':>16}{'ratio':>8}")

    local = LocalEnsemble(n)
    settings = local.draw(20000, rng)
    _, t = timed(sample_mps, mps, local, settings, 1, rng)
    ours = len(settings) / t
    _, tb = timed(quimb_loop, mps, local, settings, 200, rng)
    base = 200 / tb
    print(f"{'local, 32-site Heisenberg, chi 64':<38}{ours:>12,.0f}{base:>16,.0f}{ours / base:>8.1f}")

    shallow = ShallowEnsemble(n, 2, np.array([(i, i + 1) for i in range(n - 1)]))
    settings = shallow.draw(200, rng)
    _, tb = timed(quimb_loop, mps, shallow, settings, 50, rng)
    base = 50 / tb
    for shots in (1, 100):
        k = 200 if shots == 1 else 20
        (_, lost), t = timed(sample_mps, mps, shallow, settings.take(slice(0, k)), shots, rng, 64)
        ours = k * shots / t
        print(f"{f'shallow depth 2, {shots} shot(s)/setting':<38}{ours:>12,.0f}{base:>16,.0f}{ours / base:>8.1f}"
              f"   discarded weight {lost:.1e}")

    _, psi = exact.ground_state(tfim(build_lattice("chain", 12), J=1.0, h=1.0))
    settings = LocalEnsemble(12).draw(50000, rng)
    _, t = timed(sample_dense, psi, LocalEnsemble(12), settings, 1, rng)
    print(f"{'dense local, 12 qubits':<38}{len(settings) / t:>12,.0f}")
    parallel_mps_case()


def draw_records(mps, ensemble, settings, workers):
    """All record chunks of a simulation run (the path of manybody simulate), with ``workers`` threads."""
    seed = np.random.SeedSequence(5)
    return list(_records(mps, ensemble, settings, 1, len(settings), Noise(), "mps", 32, seed, {}, None, workers))


def parallel_mps_case():
    n, total = 100, 10**6
    mps = qtn.MPS_rand_state(n, 32, seed=1)
    local = LocalEnsemble(n)
    workers = available_cores()
    settings = local.draw(10**5, np.random.default_rng(1))
    _, t = timed(draw_records, mps, local, settings, workers)
    ours = len(settings) / t
    _, tb = timed(draw_records, mps, local, settings, 1)
    base = len(settings) / tb
    print(f"{f'local MPS n=100 chi=32, {workers} workers':<38}{ours:>12,.0f}{base:>16,.0f}{ours / base:>8.1f}"
          f"   10^6 snapshots: {total / ours:.0f} s (serial {total / base:.0f} s), scaled from 10^5")


if __name__ == "__main__":
    main()
