"""How well the planner predicts the scatter of estimates (an accuracy study, not a timing).

The slow planner test (tests/planning/test_budget.py, ``_observed_vs_planned``)
with many more repetitions and other seeds: a 6-site TFIM ground state (exact
diagonalization) is measured R times independently at depths 0-2 with 1, 20
and 200 shots per setting; the observed standard deviation of the energy and
of <Z2 Z3> over the R repetitions is divided by the planner's prediction
(exact variance of the K-shot setting mean, docs/design.md section 6). A
sample standard deviation of R normal values has relative precision
1/sqrt(2 (R - 1)), printed beside.

    python benchmarks/bench_planner_accuracy.py [R]      (default R = 400: about 20 min on 2 cores)
"""

import os
import sys
import warnings

import numpy as np

warnings.filterwarnings("ignore")
sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))  # the repository, for tests/

from tests.planning.test_budget import _observed_vs_planned  # noqa: E402

#: seeds apart from the slow test's (1000 depth + 10 shots + r)
SEED0 = 1_000_000


def main():
    repetitions = int(sys.argv[1]) if len(sys.argv) > 1 else 400
    print(f"observed / predicted standard deviation, {repetitions} repetitions "
          f"(one sigma of a ratio: {1 / np.sqrt(2 * (repetitions - 1)):.3f})")
    print(f"{'depth':>5}{'shots':>7}{'settings':>10}{'energy':>9}{'Z2 Z3':>9}")
    for depth in (0, 1, 2):
        for shots, settings in ((1, 1500), (20, 150), (200, 100)):
            (oe, pe), (oc, pc) = _observed_vs_planned(depth, shots, settings, repetitions, SEED0)
            print(f"{depth:>5}{shots:>7}{settings:>10}{oe / pe:>9.3f}{oc / pc:>9.3f}", flush=True)


if __name__ == "__main__":
    main()
