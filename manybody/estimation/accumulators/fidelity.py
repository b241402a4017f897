"""Fidelity F = <psi|rho|psi> to a target state (docs/design.md section 4).

Each snapshot gives an unbiased value <psi| M^-1(U^dag|b><b|U) |psi>
(:mod:`manybody.estimation.fidelity`: the local inverse channel as a product
over qubits, the global closed form, the shallow inverse diagonal in the
Pauli basis); the estimate is their mean, its error bar the jackknife over
blocks of settings. Robust (calibrated) estimates take one noisy eigenvalue
per qubit, so they need the local ensemble.

Shallow circuits beyond the exact size use a fitted inverse channel whose
residual r = lambda g - 1 bounds the bias (at most max |r|, less when the
worst residuals sit on few-body supports). Its bond is the cheapest whose
bound is negligible beside the statistical error that a pilot of the
shadow's own snapshots predicts (:func:`shallow_network.fitted_route`). The
snapshots are swept in single precision when its measured rounding is
negligible beside that bound (:func:`shallow_network.sweep_precision`); the
bias bound plus the rounding bound is added to the error bar in quadrature
(so the error bar is never smaller than the approximation's own error) and
recorded, with the fit's bond and residuals and the precision, in the
attributes of ``fidelity``.
"""

from __future__ import annotations

import os
import weakref

import numpy as np

from manybody.errors import InputError
from manybody.estimation.accumulators.base import Accumulator, interval_key, put
from manybody.estimation.fidelity import as_mps, fidelity_snapshots, local_route_target, uses_network_inverse

#: records per part with the fitted inverse (tens of ms per snapshot): the parts share the cores and the
#: progress bar moves every few seconds
NETWORK_PART_RECORDS = 256
#: records whose values estimate the spread of the snapshot values, for the choice of the inverse's bond
PILOT_SNAPSHOTS = 64


_PILOTS: dict = {}
_TARGETS: dict = {}


def _kept(cache: dict, key, owner, compute, limit: int):
    """compute(), once per ``key``; with an ``owner`` the entry counts only while that very object lives (ids recur).

    Every part of an estimate builds its own accumulator from the same options and shadow, so what they share is
    computed once. At most ``limit`` entries (a notebook may estimate many shadows: the last few are kept).
    """
    hit = cache.get(key)
    if hit is not None and (hit[0] is None or hit[0]() is owner):
        return hit[1]
    value = compute()
    if len(cache) >= limit:
        cache.clear()
    try:
        cache[key] = (None if owner is None else weakref.ref(owner), value)
    except TypeError:  # an object without weak references: computed each time
        pass
    return value


def network_target(target):
    """The target as an MPS, converted once per target object (a 20-qubit vector takes about a second)."""
    return _kept(_TARGETS, id(target), target, lambda: as_mps(target), 4)


def pilot(shadow, count: int = PILOT_SNAPSHOTS) -> tuple[np.ndarray, np.ndarray, int]:
    """``count`` records spread evenly over the shadow (setting positions, outcome bits) and its snapshot count.

    Read once per shadow: a shadow file that a worker reopens is the same file (keyed by path, modification
    time and records), an object in memory is itself.
    """
    def read():
        records = np.unique(np.linspace(0, shadow.n_records - 1, count).astype(np.int64)) if shadow.n_records else []
        return (*shadow.pick(records), shadow.n_snapshots)

    if shadow.origin and os.path.exists(shadow.origin):
        return _kept(_PILOTS, (shadow.origin, os.path.getmtime(shadow.origin), shadow.n_records), None, read, 16)
    return _kept(_PILOTS, (id(shadow), shadow.n_records), shadow, read, 16)


class Fidelity(Accumulator):
    plain_means = {"fidelity": "fidelity"}

    def __init__(self, setup, target, description: str):
        super().__init__(setup)
        if setup.calibrated and not setup.local:
            raise InputError("target: robust fidelities need the local ensemble (one calibrated eigenvalue per "
                             "qubit); estimate this shadow without a calibration", argument="target")
        self.target, self.description = target, description
        self.inverse = self.precision = self.route = None
        if setup.local:
            self.target = local_route_target(target)
        if uses_network_inverse(setup.ensemble):
            from manybody.estimation.shallow_network import fitted_route

            self.target = network_target(target)
            positions, bits, n_snapshots = pilot(setup.shadow)
            self.route = fitted_route(setup.ensemble, self.target, setup.shadow.settings, positions, bits,
                                      n_snapshots)
            self.inverse, self.precision = self.route.inverse, self.route.precision
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
            from manybody.estimation.shallow_network import BIAS_SHARE, BONDS

            inv = self.inverse
            attrs.update({"inverse_channel": "fitted matrix product state (approximate)",
                          "inverse_bond": int(inv.bond),
                          "inverse_bond_rule": f"the smallest of {', '.join(map(str, BONDS))} whose bias bound is "
                                               f"at most {BIAS_SHARE:g} of the expected statistical error "
                                               f"{self.route.expected_error:.3g} (from {self.route.pilot_snapshots} "
                                               "pilot snapshots), else the largest",
                          "inverse_rms_residual": float(inv.rms_residual),
                          "inverse_max_residual": float(inv.max_residual),
                          "inverse_max_residual_over": "all support patterns" if inv.exhaustive else
                          f"{inv.checked_patterns} support patterns, all few-body and nearly full ones and "
                          "samples of every other weight (an estimate)",
                          "inverse_bias_bound": float(inv.bias_bound),
                          "sweep_precision": self.precision.precision,
                          "rounding_bound": float(self.precision.rounding_bound),
                          "bias_bound_in_error": float(self.approximation_bound)})
        data["fidelity"] += (attrs,)  # (dims, value, attributes)
