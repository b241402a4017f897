"""Fidelity F = <psi|rho|psi> to a target state (docs/design.md section 4).

Each snapshot gives an unbiased value <psi| M^-1(U^dag|b><b|U) |psi>
(:mod:`manybody.estimation.fidelity`: the local inverse channel as a product
over qubits, the global closed form, the shallow inverse diagonal in the
Pauli basis); the estimate is their mean, its error bar the jackknife over
blocks of settings. Robust (calibrated) estimates take one noisy eigenvalue
per qubit, so they need the local ensemble.

Shallow circuits beyond the exact size use a fitted inverse channel whose
residual r = lambda g - 1 bounds the bias, |E[f] - F| <= max |r|. The
snapshots are swept in single precision when its measured rounding is
negligible beside that bound (:func:`shallow_network.sweep_precision`); the
bias bound plus the rounding bound is added to the error bar in quadrature
(so the error bar is never smaller than the approximation's own error) and
recorded, with the fit's bond and residuals and the precision, in the
attributes of ``fidelity``.
"""

from __future__ import annotations

import numpy as np

from manybody.errors import InputError
from manybody.estimation.accumulators.base import Accumulator, interval_key, put
from manybody.estimation.fidelity import as_mps, fidelity_snapshots, local_route_target, uses_network_inverse

#: records per part with the fitted inverse (tens of ms per snapshot): the parts share the cores and the
#: progress bar moves every few seconds
NETWORK_PART_RECORDS = 256


class Fidelity(Accumulator):
    plain_means = {"fidelity": "fidelity"}

    def __init__(self, setup, target, description: str):
        super().__init__(setup)
        if setup.calibrated and not setup.local:
            raise InputError("target: robust fidelities need the local ensemble (one calibrated eigenvalue per "
                             "qubit); estimate this shadow without a calibration", argument="target")
        self.target, self.description = target, description
        self.inverse = self.precision = None
        if setup.local:
            self.target = local_route_target(target)
        if uses_network_inverse(setup.ensemble):
            from manybody.estimation.shallow_network import shallow_inverse, sweep_precision

            self.inverse = shallow_inverse(setup.ensemble)
            self.target = as_mps(target)
            self.precision = sweep_precision(self.inverse, self.target, setup.ensemble)
            self.part_records = NETWORK_PART_RECORDS

    @classmethod
    def build(cls, setup, options):
        if options.get("target") is None:
            return None
        return cls(setup, options["target"], options.get("target_description", "given state"))

    def add(self, chunk):
        setup = self.setup
        inv = setup.lam.inv_local(setup.n_qubits) if setup.local else None
        precision = "double" if self.precision is None else self.precision.precision
        values = fidelity_snapshots(self.target, setup.ensemble, chunk.settings, chunk.where, chunk.bits,
                                    inverse=self.inverse, inv_lambda=inv, precision=precision)
        self.sums.add("fidelity", chunk.onehot, values)

    def estimates(self, s):
        return {"fidelity": s["fidelity"] / s["n"]}

    def errors(self, counts, method):
        """The statistical error bar, and the fitted inverse's bias and rounding bounds added in quadrature."""
        full, err = super().errors(counts, method)
        if self.inverse is not None and "fidelity" in err:
            bias = self.approximation_bound
            total = np.sqrt(np.asarray(err["fidelity"]) ** 2 + bias**2)
            if interval_key("fidelity") in err:
                err[interval_key("fidelity")] = np.sqrt(err[interval_key("fidelity")] ** 2 + bias**2)
            err["fidelity"] = total
        return full, err

    @property
    def approximation_bound(self) -> float:
        """|E[f] - F| from the fitted inverse (its bias bound) plus the sweep's rounding (its bound)."""
        return self.inverse.bias_bound + self.precision.rounding_bound

    def variables(self, full, err, data, coords):
        put(data, "fidelity", (), full["fidelity"], err)
        attrs = {"target": self.description}
        if self.inverse is not None:
            inv = self.inverse
            attrs.update({"inverse_channel": "fitted matrix product state (approximate)",
                          "inverse_bond": int(inv.bond), "inverse_rms_residual": float(inv.rms_residual),
                          "inverse_max_residual": float(inv.max_residual),
                          "inverse_max_residual_over": "all support patterns" if inv.exhaustive else
                          f"{inv.checked_patterns} sampled and low-weight support patterns (an estimate)",
                          "sweep_precision": self.precision.precision,
                          "rounding_bound": float(self.precision.rounding_bound),
                          "bias_bound_in_error": float(self.approximation_bound)})
        data["fidelity"] += (attrs,)  # (dims, value, attributes)
