"""The states a reference is computed for: a ground state, a product state or a given state, evolved on request."""

from __future__ import annotations

import numpy as np

from manybody.errors import InputError
from manybody.references import exact

#: DMRG sweeps grow the bond dimension along this ladder up to the requested one.
DMRG_BOND_LADDER = (16, 32, 64, 128, 256, 512)


def initial_state(model, state, kind: str, bond_dim: int = 128, cutoff: float = 1e-10, prefer_exact: bool = False):
    """(state as a dense vector or quimb MPS, attrs describing how it was obtained).

    The one place where states are made, for references and simulations alike:
    "ground" is found by exact diagonalization for dense states, and also for
    matrix product states up to MAX_EXACT_QUBITS qubits when ``prefer_exact``
    (simulations: the same state as the dense reference) or when the model
    names a particle sector; by DMRG otherwise;
    "STATE@SPEC.toml" is that state of another model on the same qubits (the
    start of a quench).
    """
    n, ham = model.n_qubits, model.hamiltonian
    if isinstance(state, str) and "@" in state:
        return _state_of_other_model(model, state, kind, bond_dim, cutoff, prefer_exact)
    if isinstance(state, str) and state == "ground":
        sector = getattr(model, "sector", None)
        if kind == "dense" or (n <= exact.MAX_EXACT_QUBITS and (prefer_exact or sector is not None)):
            energy, psi = exact.ground_state(ham, sector)
            info = {"state": "ground", "initial_method": "exact diagonalization", "ground_energy": energy}
            if sector is not None:
                info["particles"] = list(sector)
            if kind == "dense":
                return psi, info
            import quimb.tensor as qtn

            return qtn.MatrixProductState.from_dense(np.asarray(psi, dtype=complex), dims=[2] * n), info
        if sector is not None:
            raise InputError(f"{model.spec.source}: ground states in a particle sector need exact diagonalization, "
                             f"at most {exact.MAX_EXACT_QUBITS} qubits; this model has {n}", argument="state")
        ladder = [d for d in DMRG_BOND_LADDER if d < bond_dim] + [bond_dim]
        energy, psi = exact.ground_state_mps(ham, bond_dims=ladder, cutoff=cutoff)
        return psi, {"state": "ground", "initial_method": "DMRG", "ground_energy": energy}
    if isinstance(state, str):
        from manybody.simulation.experiment import product_letters

        letters = product_letters(state, n)
        if kind == "dense":
            return exact.product_state(letters), {"state": letters, "initial_method": "product state"}
        import quimb.tensor as qtn

        return (qtn.MPS_product_state([exact.SINGLE_QUBIT_STATES[c] for c in letters]),
                {"state": letters, "initial_method": "product state"})
    if isinstance(state, np.ndarray):
        psi = np.asarray(state, dtype=complex).ravel()
        if psi.shape != (2**n,) or not np.linalg.norm(psi) > 0:
            raise InputError(f"state: a vector of {2**n} amplitudes (not all zero) is needed for {n} qubits, "
                             f"got shape {np.shape(state)}")
        psi = psi / np.linalg.norm(psi)
        if kind == "dense":
            return psi, {"state": "given vector", "initial_method": "given"}
        import quimb.tensor as qtn

        return (qtn.MatrixProductState.from_dense(psi, dims=[2] * n, max_bond=bond_dim, cutoff=cutoff),
                {"state": "given vector", "initial_method": "given"})
    if hasattr(state, "to_dense") and hasattr(state, "L"):
        if state.L != n:
            raise InputError(f"state: the MPS has {state.L} sites but the model {n} qubits")
        if kind == "dense":
            psi = np.asarray(state.to_dense(), dtype=complex).ravel()
            return psi / np.linalg.norm(psi), {"state": "given MPS", "initial_method": "given"}
        return state / state.norm(), {"state": "given MPS", "initial_method": "given"}
    raise InputError(f"state {type(state).__name__}: expected 'ground', a product-state word, "
                     "a numpy vector or a quimb MPS")


def _state_of_other_model(model, state, kind, bond_dim, cutoff, prefer_exact=False):
    from hamiltonians.spec import SpecError, load_model

    name, _, path = state.partition("@")
    try:
        start = load_model(path)
    except SpecError as exc:
        raise InputError(f"state {state!r}: {exc}", argument="state") from None
    if start.n_qubits != model.n_qubits:
        raise InputError(f"state {state!r}: {path} has {start.n_qubits} qubits but the model has {model.n_qubits}",
                         argument="state")
    psi, info = initial_state(start, name, kind, bond_dim, cutoff, prefer_exact)
    return psi, {**info, "state": state}


def prepare(model, state, times, kind: str, bond_dim: int, cutoff: float, dt: float = 0.05):
    """([(time or None, state)], attrs): the state at each time and how it was computed."""
    psi, info = initial_state(model, state, kind, bond_dim, cutoff)
    info["method"] = info["initial_method"] if info["initial_method"] in ("exact diagonalization", "DMRG") else (
        "exact" if kind == "dense" else "MPS")
    if kind == "mps":
        info.update(bond_dim=bond_dim, cutoff=cutoff)
    if times is None:
        return [(None, psi)], info
    if kind == "dense":
        info["method"] = "expm_multiply"
        return list(zip(times, exact.evolve(model.hamiltonian, psi, times))), info
    try:
        states, trotter = exact.evolve_mps(model.hamiltonian, psi, times, dt=dt, bond_dim=bond_dim, cutoff=cutoff)
    except ValueError as exc:
        raise InputError(f"{model.spec.source}: {exc}") from None
    info.update(method="TEBD", time_step=dt, trotter_order=4, trotter_error=float(trotter))
    return list(zip(times, states)), info
