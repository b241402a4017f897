"""OpenQASM 3 export: the exported circuit implements the stored setting."""

import re

import numpy as np
import pytest
import stim

from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from manybody.measure.qasm import setting_qasm
from tests.helpers import chain, dense_unitary

QASM_TO_STIM = {"h": "H", "s": "S", "sdg": "S_DAG", "x": "X", "y": "Y", "z": "Z", "cx": "CX"}


def qasm_to_stim(text, n):
    """Read the gate lines back (stim as the independent simulator)."""
    circuit = stim.Circuit()
    circuit.append("I", [n - 1])
    assert text.startswith("OPENQASM 3.0;\ninclude \"stdgates.inc\";")
    assert text.rstrip().endswith("c = measure q;")
    for name, args in re.findall(r"^(h|s|sdg|x|y|z|cx) (q\[\d+\](?:, q\[\d+\])?);$", text, flags=re.M):
        circuit.append(QASM_TO_STIM[name], [int(i) for i in re.findall(r"\d+", args)])
    return circuit


@pytest.mark.parametrize("ens", [LocalEnsemble(4), ShallowEnsemble(4, 2, chain(4)), GlobalEnsemble(4)],
                         ids=lambda e: e.kind)
def test_exported_circuit_equals_setting(ens):
    settings = ens.draw(5, np.random.default_rng(8))
    for k in range(5):
        text = setting_qasm(ens, settings, k)
        u_qasm = stim.Tableau.from_circuit(qasm_to_stim(text, 4)).to_unitary_matrix(endian="big")
        u_ref = dense_unitary(ens, settings, k)
        overlap = abs(np.trace(u_qasm.conj().T @ u_ref)) / 16
        assert overlap == pytest.approx(1.0)
