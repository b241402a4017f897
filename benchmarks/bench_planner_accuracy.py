"""How well the planner predicts the scatter of estimates (an accuracy study, not a timing).

A 6-site TFIM ground state (exact diagonalization) is measured R times
independently at depths 0-2 with 1, 20 and 200 shots per setting; the
observed standard deviation of the energy and of <Z2 Z3> over the R
repetitions is divided by the planner's prediction (exact variance of the
K-shot setting mean, docs/design.md section 6). A sample standard deviation
of R normal values has relative precision 1/sqrt(2 (R - 1)), printed beside.

    python benchmarks/bench_planner_accuracy.py [R]      (default R = 400: about 20 min on 2 cores)
"""

import sys
import warnings

import numpy as np

warnings.filterwarnings("ignore")

from hamiltonians import PauliExpansion  # noqa: E402
from hamiltonians.spec import parse_spec  # noqa: E402
from manybody.estimation.driver import estimate  # noqa: E402
from manybody.io.shadow import Shadow  # noqa: E402
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble  # noqa: E402
from manybody.measure.prepare import coupling_of  # noqa: E402
from manybody.planning.budget import pauli_setting_variance, plan  # noqa: E402
from manybody.references import exact  # noqa: E402
from manybody.simulation.sampling import sample_dense  # noqa: E402

SPEC = '[lattice]\nkind = "chain"\nsize = [6]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 0.8\n'


def shadow_of(psi, ens, settings, shots, seed):
    rng = np.random.default_rng(seed)
    drawn = ens.draw(settings, rng)
    bits = sample_dense(psi, ens, drawn, shots, rng)
    return Shadow(ensemble=ens, settings=drawn, qubit_site=np.arange(ens.n_qubits),
                  record_setting=np.repeat(drawn.ids, shots), outcomes=bits, counts=np.ones(len(bits), np.int64))


def ratios(model, psi, depth, shots, settings, repetitions):
    expectation = lambda op: exact.pauli_expectations(op, psi)  # noqa: E731
    eps = 0.01
    ds = plan(model, eps, depths=(depth,), expectation=expectation, shots=shots)
    ens = LocalEnsemble(6) if depth == 0 else ShallowEnsemble(6, depth, coupling_of(model))
    energies, corr = [], []
    for r in range(repetitions):
        res = estimate(shadow_of(psi, ens, settings, shots, 7919 * depth + 31 * shots + r), model, [],
                       quantities=("energy", "correlations"), mutual_information=False)
        energies.append(float(res.energy))
        corr.append(float(res.correlation.sel(axis_a="Z", axis_b="Z", site_a=2, site_b=3)))
    zz = np.zeros(6, np.uint8)
    zz[[2, 3]] = 2
    p = float(expectation(PauliExpansion.from_strings("IIZZII"))[0])
    predicted_corr = np.sqrt(pauli_setting_variance(ens.eigenvalue(zz != 0), shots, p) / settings)
    predicted_energy = np.sqrt(ds.energy.values[0] / shots * eps**2 / settings)
    return np.std(energies, ddof=1) / predicted_energy, np.std(corr, ddof=1) / predicted_corr


def main():
    repetitions = int(sys.argv[1]) if len(sys.argv) > 1 else 400
    model = parse_spec(SPEC).build()
    psi = exact.ground_state(model.hamiltonian)[1]
    print(f"observed / predicted standard deviation, {repetitions} repetitions "
          f"(one sigma of a ratio: {1 / np.sqrt(2 * (repetitions - 1)):.3f})")
    print(f"{'depth':>5}{'shots':>7}{'settings':>10}{'energy':>9}{'Z2 Z3':>9}")
    for depth in (0, 1, 2):
        for shots, settings in ((1, 1500), (20, 150), (200, 100)):
            e, c = ratios(model, psi, depth, shots, settings, repetitions)
            print(f"{depth:>5}{shots:>7}{settings:>10}{e:>9.3f}{c:>9.3f}", flush=True)


if __name__ == "__main__":
    main()
