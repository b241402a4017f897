"""Drawing measurement settings for a model: ensemble, coupling graph, seed."""

from __future__ import annotations

import numpy as np

from manybody.io.shadow import Shadow
from manybody.measure.ensembles import make_ensemble


def coupling_of(model) -> np.ndarray:
    """Qubit pairs a device couples for this model.

    Spin models: the lattice's nearest bonds. Fermi-Hubbard (two qubits per
    site in Jordan-Wigner order): a chain through the qubits.
    """
    if model.n_qubits == model.lattice.n_sites:
        return model.lattice.bonds
    return np.array([(q, q + 1) for q in range(model.n_qubits - 1)], dtype=np.int64)


def fresh_seed() -> int:
    """A random seed, recorded wherever it is used so that the run can be repeated."""
    return int(np.random.SeedSequence().entropy % (2**63))


def prepare_settings(model, kind: str, n_settings: int, depth: int = 0, seed: int | None = None) -> Shadow:
    """Settings (no records yet) for ``model`` drawn from the named ensemble."""
    seed = fresh_seed() if seed is None else int(seed)
    ens = make_ensemble(kind, model.n_qubits, depth, coupling_of(model))
    settings = ens.draw(n_settings, np.random.default_rng(seed))
    return Shadow(ensemble=ens, settings=settings, qubit_site=model.qubit_site, model_spec=model.spec.text,
                  seed=seed, source="drawn by manybody prepare")
