"""Shallow-circuit fidelity to a 40-site MPS target of bond 32: time per snapshot and fit residual.

Ours: manybody.estimation.shallow_network (fitted inverse g ~ 1/lambda of bond
D, snapshots in chunks grouped by the bonds of U^dag|b>, chunks on the spare
cores, real targets with real Hermitian environments), in double precision
and in the single precision that estimates use when its rounding is
negligible beside the fit's bias bound (max |diff| is against the baseline,
which is in double precision). Baseline: a straightforward quimb contraction
per snapshot of <psi| G(|phi><phi|) |psi> (the same g, the same phi =
U^dag|b>), as one tensor network with a greedy path. Targets: a random
complex MPS, a random real one, and the ground state of the critical Ising
chain (real, as ground states of real Hamiltonians are; DMRG kept at bond 32
without truncation) with the bond and precision that an estimate from 10^4
of its own snapshots takes. Outcome bits are uniform for the random targets
(the cost does not depend on them) and Born-sampled for the ground state.
64 snapshots by default; --snapshots 10000 is the issue's full size.

The last column is the floor of this route: the ket and bra products with the
target alone, counted exactly over the snapshots' bonds, at the rate this
machine multiplies such matrices, divided among the threads.

Run: python benchmarks/bench_shallow_fidelity.py [--quick] [--snapshots N] (N = 10000: ~20 min)
"""

from __future__ import annotations

import sys
import time
from functools import partial

import numpy as np
import quimb.tensor as qtn

from manybody.estimation import shallow_network as sn
from manybody.measure.ensembles import ShallowEnsemble
from manybody.simulation.sampling import mps_site_tensors, sample_mps
from manybody.threads import single_threaded_blas, spare_workers

#: runs of ours per row; the table shows the fastest
REPEATS = 3


def timed(fn):
    start = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - start


def baseline(inverse, tensors, ens, settings, setting_index, bits):
    """Per snapshot: phi_b = P_b U^dag|0>, the MPO of G(|phi_b><phi_b|), one quimb contraction."""
    n = ens.n_qubits
    flips = {0: np.eye(2), 1: np.array([[0, 1], [1, 0]]), 2: np.diag([1.0, -1.0]), 3: np.array([[0, -1], [1, 0]])}  # Y up to a phase
    out = []
    for k, b in zip(setting_index, bits):
        one = settings.take(np.array([k]))
        phi, ranks = sn.compress_states(sn.setting_states(ens, one))
        gen = sn.flip_generators(ens, one)[0]
        xz = b @ np.stack([gen & 1, gen >> 1], axis=-1).reshape(n, 2 * n) % 2
        tn = []
        for q in range(n):
            code = int(xz[2 * q] + 2 * xz[2 * q + 1])  # Pauli code x + 2z of P_b on qubit q
            f = np.einsum("st,ctC->csC", flips[code], phi[q][0, :ranks[0, q], :, :ranks[0, q + 1]])
            g = inverse.inverse[q]
            keep = np.einsum("csC,dtD,kK->cdkstCDK", f, f.conj(), g[:, 1, :])
            tr = np.einsum("cuC,duD,kK,st->cdkstCDK", f, f.conj(), 0.5 * (g[:, 0, :] - g[:, 1, :]), np.eye(2))
            o = (keep + tr).reshape(f.shape[0] ** 2 * g.shape[0], 2, 2, -1)
            a = tensors[q]
            tn += [qtn.Tensor(a, inds=(f"k{q}", f"k{q + 1}", f"t{q}")),
                   qtn.Tensor(a.conj(), inds=(f"b{q}", f"b{q + 1}", f"s{q}")),
                   qtn.Tensor(o, inds=(f"o{q}", f"s{q}", f"t{q}", f"o{q + 1}"))]
        value = qtn.TensorNetwork(tn).contract(..., optimize="greedy")
        value = value.data if isinstance(value, qtn.Tensor) else value  # open size-1 end bonds
        out.append(complex(np.asarray(value).ravel()[0]).real)
    return np.array(out)


def target_products_floor(inverse, tensors, ens, settings, workers, precision):
    """ms per snapshot that the target's ket and bra products alone need at this machine's matrix-product rate.

    Per qubit q and snapshot: 2 D_l c_l^2 chi_l^2 chi_r (ket) + 2 D_r c_r^2 chi_r^2 chi_l (bra), summed exactly
    over the snapshots' bonds of U^dag|b> (c) and of g (D) and the target's bonds (a real target: two real
    kets, one real bra); the rate is that of a (2048 x 32) @ (32 x 64)
    product on one thread (real numbers for a real target, in the sweep's precision), shared by ``workers`` threads.
    """
    _, ranks = sn.compress_states(sn.setting_states(ens, settings))
    real = not np.iscomplexobj(tensors[0])
    macs = 0.0
    for q, a in enumerate(tensors):
        left, right = a.shape[:2]
        d_l, d_r = inverse.inverse[q].shape[0], inverse.inverse[q].shape[2]
        c_l, c_r = ranks[:, q].astype(float), ranks[:, q + 1].astype(float)
        ket, bra = d_l * c_l**2 * left * left * 2 * right, d_r * c_r**2 * right * left * 2 * right
        macs += np.mean(2 * ket + bra if real else ket + bra)  # a real target: R A and R^dag A, one real bra
    real_type, complex_type = sn.PRECISIONS[precision]
    dtype = real_type if real else complex_type
    x, y = np.ones((2048, 32), dtype=dtype), np.ones((32, 64), dtype=dtype)
    with single_threaded_blas():
        x @ y
        start = time.perf_counter()
        for _ in range(20):
            x @ y
        rate = 20 * 2048 * 32 * 64 / (time.perf_counter() - start)
    return 1e3 * macs / rate / workers


def targets(kind: str, n: int, chi: int):
    """A random complex or real MPS, or the critical Ising chain's ground state (quimb DMRG), as a quimb MPS."""
    if kind == "ground":  # H = -sum Z Z - sum X (Pauli operators), open chain, bond chi
        dmrg = qtn.DMRG2(qtn.MPO_ham_ising(n, j=4.0, bx=2.0), bond_dims=[8, 16, chi], cutoffs=0.0)
        dmrg.solve(tol=1e-8, verbosity=0)
        return dmrg.state
    return qtn.MPS_rand_state(n, chi, dtype="float64" if kind == "real" else complex, seed=0)


def main(quick: bool, snapshots: int = 64):
    n, chi, depth = 40, 32, 3
    ens = ShallowEnsemble(n, depth, np.array([(q, q + 1) for q in range(n - 1)]))
    rng = np.random.default_rng(1)
    n_snapshots, n_baseline = (16, 2) if quick else (snapshots, 4)
    settings = ens.draw(n_snapshots, rng)
    uniform = rng.integers(0, 2, size=(n_snapshots, n))
    index = np.arange(n_snapshots)
    sn.shallow_fidelity_mps(sn.shallow_inverse(ens, bond=1), [np.ones((1, 1, 2))] * n, ens, settings, index[:1],
                            uniform[:1])  # builds the two-qubit Clifford table once, outside the timings
    print(f"{n}-site MPS targets of bond {chi}, depth-{depth} brickwork, {n_snapshots} snapshots (baseline on "
          f"{n_baseline}), {spare_workers()} threads, ours: fastest of {REPEATS} runs")
    print(f"{'target':>8} {'D':>3} {'numbers':>8} {'fit s':>7} {'rms r':>9} {'max |r|':>9} {'bias bound':>11} "
          f"{'ours ms/snap':>13} {'baseline ms/snap':>17} {'ratio':>7} {'max |diff|':>11} {'floor ms/snap':>14}")
    runs = [("complex", bond, "double") for bond in ((4, 8) if quick else (4, 6, 8))]
    runs += [("complex", 8, "single"), ("real", 8, "double"), ("real", 8, "single"), ("ground", None, None)]
    for kind, bond, precision in runs:
        state = targets(kind, n, chi)
        tensors, bits = mps_site_tensors(state), uniform
        if bond is None:  # as estimate chooses for 10^4 snapshots of the state itself (Born-sampled pilot)
            bits, _ = sample_mps(state, ens, settings, 1, np.random.default_rng(2))
            pilot = min(n_snapshots, 64)
            route, fit_time = timed(partial(sn.fitted_route, ens, tensors, settings, index[:pilot], bits[:pilot],
                                            10**4))
            inverse, precision, kind = route.inverse, route.precision.precision, "ground*"
        else:
            inverse, fit_time = timed(partial(sn.shallow_inverse, ens, bond=bond))
        run = partial(sn.shallow_fidelity_mps, inverse, tensors, ens, settings, index, bits, precision=precision)
        ours, t_ours = timed(run)
        for _ in range(REPEATS - 1):  # the fastest of a few runs: this machine's timings wander by 10-30%
            t_ours = min(t_ours, timed(run)[1])
        base, t_base = timed(partial(baseline, inverse, tensors, ens, settings, index[:n_baseline],
                                     bits[:n_baseline]))
        per_ours, per_base = 1e3 * t_ours / n_snapshots, 1e3 * t_base / n_baseline
        print(f"{kind:>8} {inverse.bond:>3} {precision:>8} {fit_time:>7.2f} {inverse.rms_residual:>9.2e} "
              f"{inverse.max_residual:>9.2e} {inverse.bias_bound:>11.2e} "
              f"{per_ours:>13.1f} {per_base:>17.1f} {per_base / per_ours:>7.1f} "
              f"{np.max(np.abs(ours[:n_baseline] - base)):>11.1e} "
              f"{target_products_floor(inverse, tensors, ens, settings, spare_workers(), precision):>14.1f}")
    print("ground*: the critical Ising chain's ground state, its own snapshots, the bond and precision that an")
    print("estimate from 10^4 snapshots takes (manybody.estimation.shallow_network.fitted_route; fit s includes")
    print("the pilot). rms r with the fit's weights; max |r| and the bias bound over sampled patterns of every weight.")
    print("floor: the target's two matrix products per qubit alone (bra and ket over the bonds of g and of U^dag|b>),")
    print("at this machine's rate for such products, shared by the threads: the qubit maps come on top")


if __name__ == "__main__":
    main("--quick" in sys.argv, int(sys.argv[sys.argv.index("--snapshots") + 1]) if "--snapshots" in sys.argv else 64)
