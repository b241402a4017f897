"""Lattice models as sparse Pauli sums: lattices, PauliExpansion, models, the TOML spec."""

from .lattice import LATTICE_KINDS, Lattice, LatticeError, build_lattice
from .models import MODEL_KINDS, MODEL_PARAMETERS, ModelError, build_hamiltonian, particle_number
from .pauli import PauliExpansion
from .spec import Model, ModelSpec, SpecError, load_model, parse_spec, read_spec

__all__ = [
    "LATTICE_KINDS", "Lattice", "LatticeError", "build_lattice",
    "MODEL_KINDS", "MODEL_PARAMETERS", "ModelError", "build_hamiltonian", "particle_number",
    "PauliExpansion", "Model", "ModelSpec", "SpecError", "load_model", "parse_spec", "read_spec",
]
