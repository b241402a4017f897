"""OpenQASM 3 export of measurement settings (standard gates h, s, sdg, x, y, z, cx)."""

from __future__ import annotations

import os

from manybody.io.files import atomic_path
from manybody.measure.ensembles import Settings
from manybody.measure.paulis import BASIS_LETTERS

_STIM_TO_QASM = {"H": "h", "S": "s", "S_DAG": "sdg", "X": "x", "Y": "y", "Z": "z", "CX": "cx"}


def tableau_of(tableau_x, tableau_z, tableau_sign):
    """The stim.Tableau of a stored n-qubit Clifford (images of X_0, Z_0, X_1, Z_1, ... with signs)."""
    import stim

    n = tableau_x.shape[-1]

    def pauli(x, z, s):
        return stim.PauliString(("-" if s < 0 else "+") + "".join("_XZY"[a + 2 * b] for a, b in zip(x, z)))

    return stim.Tableau.from_conjugated_generators(
        xs=[pauli(tableau_x[2 * q], tableau_z[2 * q], tableau_sign[2 * q]) for q in range(n)],
        zs=[pauli(tableau_x[2 * q + 1], tableau_z[2 * q + 1], tableau_sign[2 * q + 1]) for q in range(n)])


def tableau_gates(tableau_x, tableau_z, tableau_sign):
    """Gate list of an n-qubit Clifford tableau, synthesised by stim (Gaussian elimination)."""
    tab = tableau_of(tableau_x, tableau_z, tableau_sign)
    ops = []
    for inst in tab.to_circuit("elimination"):
        name = _STIM_TO_QASM[inst.name]
        targets = [t.value for t in inst.targets_copy()]
        width = 2 if name == "cx" else 1
        ops += [(name, tuple(targets[i:i + width])) for i in range(0, len(targets), width)]
    return ops


def setting_ops(ensemble, settings: Settings, k: int):
    """Gate list (name, qubits) in time order for setting position k, rotations to the bases included."""
    return ensemble.gates(settings, k)


def setting_qasm(ensemble, settings: Settings, k: int) -> str:
    n = ensemble.n_qubits
    lines = ["OPENQASM 3.0;", 'include "stdgates.inc";',
             f"// manybody setting {int(settings.ids[k])}: {ensemble.describe()}"]
    if settings.basis is not None:
        lines.append("// measured bases, qubit 0 first: "
                     + "".join(BASIS_LETTERS[b] for b in settings.basis[k].tolist()))
    lines += [f"qubit[{n}] q;", f"bit[{n}] c;"]
    lines += [f"{name} " + ", ".join(f"q[{q}]" for q in qs) + ";" for name, qs in setting_ops(ensemble, settings, k)]
    lines.append("c = measure q;")
    return "\n".join(lines) + "\n"


def write_qasm_files(ensemble, settings: Settings, folder, progress=None) -> int:
    """One file ``setting_<id>.qasm`` per setting; returns the number written."""
    os.makedirs(folder, exist_ok=True)
    indices = range(len(settings))
    for k in (progress(indices) if progress else indices):
        with atomic_path(os.path.join(folder, f"setting_{int(settings.ids[k])}.qasm")) as tmp:
            with open(tmp, "w") as fh:
                fh.write(setting_qasm(ensemble, settings, k))
    return len(settings)
