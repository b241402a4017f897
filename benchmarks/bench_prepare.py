"""prepare with --qasm: 10^4 shallow depth-4 settings on a 32-qubit chain.

Times drawing the settings, writing the settings file and writing one
OpenQASM 3 file per setting. Baseline: the same circuits built as stim
circuits and exported with stim's own OpenQASM 3 writer (on 10^3 settings,
scaled).

    python benchmarks/bench_prepare.py
"""

import os
import tempfile
import time

import stim

from hamiltonians.spec import parse_spec
from manybody.io.shadow import write_shadow
from manybody.measure.prepare import prepare_settings
from manybody.measure.qasm import setting_ops, write_qasm_files

SPEC = '[lattice]\nkind = "chain"\nsize = [32]\n[model]\nkind = "heisenberg"\n'
STIM_NAME = {"h": "H", "s": "S", "sdg": "S_DAG", "x": "X", "y": "Y", "z": "Z", "cx": "CX"}
K = 10_000


def main():
    model = parse_spec(SPEC).build()
    with tempfile.TemporaryDirectory() as tmp:
        t = time.perf_counter()
        shadow = prepare_settings(model, "shallow", K, depth=4, seed=1)
        t_draw = time.perf_counter() - t
        t = time.perf_counter()
        write_shadow(shadow, os.path.join(tmp, "settings.nc"))
        t_file = time.perf_counter() - t
        t = time.perf_counter()
        write_qasm_files(shadow.ensemble, shadow.settings, os.path.join(tmp, "qasm"))
        t_qasm = time.perf_counter() - t
        sample = 1000
        t = time.perf_counter()
        for k in range(sample):
            circuit = stim.Circuit()
            for name, qubits in setting_ops(shadow.ensemble, shadow.settings, k):
                circuit.append(STIM_NAME[name], list(qubits))
            circuit.append("M", list(range(32)))
            with open(os.path.join(tmp, f"stim_{k}.qasm"), "w") as fh:
                fh.write(circuit.to_qasm(open_qasm_version=3))
        t_stim = (time.perf_counter() - t) * K / sample
    print(f"{K} shallow depth-4 settings on 32 qubits")
    print(f"draw {t_draw:.2f} s, settings file {t_file:.2f} s")
    print(f"{'':<34}{'time [s]':>10}{'files/s':>10}")
    print(f"{'ours: write_qasm_files':<34}{t_qasm:>10.2f}{K / t_qasm:>10.0f}")
    print(f"{'stim circuits + to_qasm (scaled)':<34}{t_stim:>10.2f}{K / t_stim:>10.0f}")
    print(f"ratio {t_stim / t_qasm:.1f}")


if __name__ == "__main__":
    main()
