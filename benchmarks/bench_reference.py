"""Exact references: dense datasets from bitmask kernels vs one sparse matrix per Pauli string; MPS references.

Dense: a 16-qubit transverse-field Ising quench from |0...0> at 9 times.
The evolution (scipy expm_multiply) is shared and timed apart; then the
dataset of every time is built by ours (manybody.references.dataset) and by
the straightforward baseline below (a scipy.sparse matrix per one- and
two-site Pauli string, H^2 as a Pauli sum, a reduced density matrix per
pair), and the values are compared. Target: ratio >= 10.

MPS: the 64-site chain quench at 20 times through ``reference`` (TEBD and
the MPS dataset); target under 60 s on 2 cores. Its baseline is quimb's own
``MatrixProductState.correlation`` for the Z-Z map of the last state (one of
the nine axis pairs), timed on a subset of pairs and scaled to all pairs.

    python benchmarks/bench_reference.py [--dense-times 9] [--skip-mps]

On a machine shared with other jobs, multithreaded BLAS on small matrices
can stall; OPENBLAS_NUM_THREADS=1 gives steadier numbers.
"""

import argparse
import itertools
import time
from collections import namedtuple

import numpy as np

from hamiltonians.pauli import PauliExpansion
from hamiltonians.spec import parse_spec
from manybody.references import exact, parse_time_grid, reference
from manybody.references.dataset import reference_dataset
from manybody.schema import term_table

Subsystem = namedtuple("Subsystem", "label sites")


def chain_model(n):
    return parse_spec(f'[lattice]\nkind = "chain"\nsize = [{n}]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 1.0\n').build()


def baseline_dataset(model, psi, subsystems):
    """The straightforward path: one sparse matrix per string, <H^2> from the Pauli sum H*H."""
    n, ham = model.n_qubits, model.hamiltonian

    def string(pairs):
        s = ["I"] * n
        for q, a in pairs:
            s[q] = a
        return exact.expectation(PauliExpansion.from_strings("".join(s)), psi)

    _, coeffs, density = term_table(ham, model.qubit_site, model.n_sites)
    values = exact.pauli_expectations(ham.simplify(), psi)
    energy = float(np.real(values @ coeffs))
    variance = float(np.real(exact.expectation((ham * ham).combined(atol=1e-12), psi))) - energy**2
    mag = np.array([[string([(q, a)]) for q in range(n)] for a in "XYZ"])
    corr = np.full((3, 3, n, n), np.nan)
    for (i, a), (j, b) in itertools.product(enumerate("XYZ"), repeat=2):
        for q, r in itertools.permutations(range(n), 2):
            corr[i, j, q, r] = string([(q, a), (r, b)])
    single = np.array([exact.purity(exact.reduced_density_matrix(psi, [q])) for q in range(n)])
    mi = np.full((n, n), np.nan)
    for q, r in itertools.combinations(range(n), 2):
        pair = exact.purity(exact.reduced_density_matrix(psi, [q, r]))
        mi[q, r] = mi[r, q] = -np.log(single[q]) - np.log(single[r]) + np.log(pair)
    purity = [exact.purity(exact.reduced_density_matrix(psi, list(s.sites))) for s in subsystems]
    return {"energy": energy, "energy_density": values @ density, "energy_variance": variance,
            "magnetization": mag, "correlation": corr, "mutual_information": mi, "purity": np.array(purity)}


def timed(fn):
    t = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t


def dense_case(n_times):
    model = chain_model(16)
    subsystems = [Subsystem("0-7", tuple(range(8))), Subsystem("4-11", tuple(range(4, 12)))]
    times = np.linspace(0, 2, n_times).tolist()
    states, t_evolve = timed(lambda: exact.evolve(model.hamiltonian, exact.product_state("0" * 16), times))
    ours, t_ours = timed(lambda: [reference_dataset(model, psi, subsystems) for psi in states])
    base, t_base = timed(lambda: [baseline_dataset(model, psi, subsystems) for psi in states])
    worst = max(np.nanmax(np.abs(ds[k].values - b[k])) for ds, b in zip(ours, base) for k in b)
    print(f"dense, 16-qubit TFIM quench, {n_times} times (evolution {t_evolve:.2f} s, shared; "
          f"largest difference {worst:.1e})")
    print(f"{'':<28}{'ours [s]':>10}{'baseline [s]':>14}{'ratio':>8}")
    print(f"{'datasets':<28}{t_ours:>10.2f}{t_base:>14.2f}{t_base / t_ours:>8.1f}")


def mps_case():
    model = chain_model(64)
    subsystems = [Subsystem("0-31", tuple(range(32))), Subsystem("24-39", tuple(range(24, 40)))]
    ds, t_ours = timed(lambda: reference(model, "zero", times=parse_time_grid("0:2:20"), subsystems=subsystems))
    print(f"\nMPS, 64-site TFIM quench, 20 times in [0, 2] (TEBD, bond dimension <= {ds.attrs['bond_dim']}, "
          f"reached {ds.attrs['max_bond_dimension']}, discarded weight {ds.attrs['discarded_weight']:.1e})")
    print(f"reference(): {t_ours:.1f} s (target < 60 s)")
    # baseline: quimb's correlation function pair by pair, last state, Z-Z only, on 64 pairs, scaled
    import quimb as qu

    from manybody.references.prepare import prepare

    states, _ = prepare(model, "zero", parse_time_grid("0:2:20"), "mps", 128, 1e-10)  # the same TEBD run
    psi = states[-1][1]
    # quimb's correlation() is the connected one, <A_i B_j> - <A_i><B_j>
    ours_zz = ds.connected_correlation.sel(axis_a="Z", axis_b="Z").isel(time=-1).values
    rng = np.random.default_rng(0)
    pairs = [tuple(sorted(rng.choice(64, 2, replace=False))) for _ in range(64)]
    vals, t_pairs = timed(lambda: [psi.correlation(qu.pauli("Z"), int(q), int(r)) for q, r in pairs])
    diff = max(abs(v - ours_zz[q, r]) for v, (q, r) in zip(vals, pairs))
    t_all = t_pairs / len(pairs) * 64 * 63 / 2 * 9
    print(f"quimb correlation(), one state: {t_pairs:.1f} s for {len(pairs)} Z-Z pairs -> "
          f"~{t_all:.0f} s for the 9 x 2016 pairs of one time, ~{20 * t_all:.0f} s for 20 times "
          f"(largest difference {diff:.1e}; ours renormalises the truncated state, quimb's does not)")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dense-times", type=int, default=9)
    parser.add_argument("--skip-mps", action="store_true")
    args = parser.parse_args()
    dense_case(args.dense_times)
    if not args.skip_mps:
        mps_case()


if __name__ == "__main__":
    main()
