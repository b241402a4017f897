"""Drawing measurement settings for a model: ensemble, coupling graph, seed."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from manybody.measure.ensembles import Ensemble, Settings, make_ensemble


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


@dataclass(frozen=True, eq=False)
class PreparedSettings(Settings):
    """Settings drawn for a model, with what it takes to use them: the ensemble, the qubit map, the spec, the seed."""

    ensemble: Ensemble | None = None
    qubit_site: np.ndarray | None = None
    model_spec: str = ""
    seed: int | None = None

    @property
    def n_qubits(self) -> int:
        return self.ensemble.n_qubits

    def shadow(self):
        """The settings as a Shadow without records (what a settings file holds)."""
        from manybody.io.shadow import Shadow

        plain = Settings(self.ids, self.basis, self.gates, self.tableau_x, self.tableau_z, self.tableau_sign)
        return Shadow(ensemble=self.ensemble, settings=plain, qubit_site=self.qubit_site,
                      model_spec=self.model_spec, seed=self.seed, source="drawn by manybody prepare")

    def to_netcdf(self, path) -> None:
        """Write a settings file (atomically)."""
        from manybody.io.shadow import write_shadow

        write_shadow(self.shadow(), path)

    def to_qasm(self, folder, progress=None) -> int:
        """One OpenQASM 3 file per setting in ``folder`` (setting_<id>.qasm); returns how many."""
        from manybody.measure.qasm import write_qasm_files

        return write_qasm_files(self.ensemble, self, folder, progress)


def prepare_settings(model, kind: str, n_settings: int, depth: int = 0, seed: int | None = None) -> PreparedSettings:
    """Settings (no records yet) for ``model`` drawn from the named ensemble."""
    seed = fresh_seed() if seed is None else int(seed)
    ens = make_ensemble(kind, model.n_qubits, depth, coupling_of(model))
    st = ens.draw(n_settings, np.random.default_rng(seed))
    return PreparedSettings(st.ids, st.basis, st.gates, st.tableau_x, st.tableau_z, st.tableau_sign,
                            ensemble=ens, qubit_site=np.asarray(model.qubit_site), model_spec=model.spec.text,
                            seed=seed)
