"""Fidelity F = <psi|rho|psi> to a target state (docs/design.md section 4).

Each snapshot gives an unbiased value <psi| M^-1(U^dag|b><b|U) |psi>
(:mod:`manybody.estimation.fidelity`: the local inverse channel as a product
over qubits, the global closed form, the shallow inverse diagonal in the
Pauli basis); the estimate is their mean, its error bar the jackknife over
blocks of settings. Robust (calibrated) estimates take one noisy eigenvalue
per qubit, so they need the local ensemble.
"""

from __future__ import annotations

from manybody.errors import InputError
from manybody.estimation.accumulators.base import Accumulator, put
from manybody.estimation.fidelity import fidelity_snapshots, local_fidelity_dense, local_fidelity_mps


class Fidelity(Accumulator):
    plain_means = {"fidelity": "fidelity"}

    def __init__(self, setup, target, description: str):
        super().__init__(setup)
        if setup.calibrated and not setup.local:
            raise InputError("target: robust fidelities need the local ensemble (one calibrated eigenvalue per "
                             "qubit); estimate this shadow without a calibration", argument="target")
        self.target, self.description = target, description

    @classmethod
    def build(cls, setup, options):
        if options.get("target") is None:
            return None
        return cls(setup, options["target"], options.get("target_description", "given state"))

    def add(self, chunk):
        setup = self.setup
        if setup.local:
            inv = setup.lam.inv_local(setup.n_qubits)
            mps = hasattr(self.target, "to_dense") and not hasattr(self.target, "shape")
            kernel = local_fidelity_mps if mps else local_fidelity_dense
            values = kernel(self.target, chunk.basis, chunk.bits, inv)
        else:
            values = fidelity_snapshots(self.target, setup.ensemble, chunk.settings, chunk.where, chunk.bits)
        self.sums.add("fidelity", chunk.onehot, values)

    def estimates(self, s):
        return {"fidelity": s["fidelity"] / s["n"]}

    def variables(self, full, err, data, coords):
        put(data, "fidelity", (), full["fidelity"], err)
        data["fidelity"] += ({"target": self.description},)  # (dims, value, attributes)
