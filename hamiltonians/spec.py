"""The TOML model spec (docs/formats.md): read, validate, build.

    [lattice]
    kind = "chain"          # chain, ladder, square, triangular, honeycomb, kagome
    size = [12]             # cells per direction
    boundary = "open"       # open or periodic, or one per direction
    order = "row"           # optional: row or snake

    [model]
    kind = "tfim"           # tfim, xxz, heisenberg, j1j2, xy, kitaev, hubbard, custom
    J = 1.0
    h = 1.0
    units = "pauli"         # optional: pauli (sigma) or spin (S = sigma/2)

    [[model.term]]          # custom terms, repeatable
    pauli = "ZZ"
    on = "bonds"            # sites, bonds, next_bonds
    coefficient = -1.0

Every problem is reported as one sentence naming the file, the key and what
is allowed, through :class:`SpecError`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
import math
import os
import tomllib

import numpy as np

from .lattice import BOUNDARIES, LATTICE_KINDS, ORDERS, Lattice, LatticeError, build_lattice
from .models import MODEL_KINDS, MODEL_PARAMETERS, UNITS, ModelError, Term, build_hamiltonian, qubit_sites
from .pauli import PauliExpansion

TOP_KEYS = ("name", "description", "lattice", "model")
LATTICE_KEYS = ("kind", "size", "boundary", "order")
TERM_KEYS = ("pauli", "on", "coefficient")
TERM_TARGETS = ("sites", "bonds", "next_bonds")
MAX_SITES = 100_000
#: largest coupling magnitude: |c|^2 summed over many terms must stay far from float overflow
MAX_COUPLING = 1e100
#: the Pauli sum of a model (packed bit rows of every term) must fit in this much memory
MAX_PAULI_SUM_BYTES = 2 * 2**30
#: sites per unit cell and nearest / next-nearest coordination of each lattice (common practice, no source)
_CELL = {"chain": (1, 2, 2), "ladder": (2, 3, 2), "square": (1, 4, 4), "triangular": (1, 6, 6),
         "honeycomb": (2, 3, 6), "kagome": (3, 4, 4)}
#: Pauli strings per bond (nearest, next-nearest) and per site, by model
_TERMS = {"tfim": (1, 0, 1), "xxz": (3, 0, 1), "heisenberg": (3, 0, 0), "j1j2": (3, 3, 0), "xy": (2, 0, 1),
          "kitaev": (1, 0, 0), "hubbard": (4, 0, 3), "custom": (1, 1, 1)}


def pauli_sum_bytes(lattice_kind: str, cells: int, model_kind: str, custom_terms: int = 0) -> int:
    """Memory of a model's Pauli sum before building it: terms x 2 bit rows x 8 bytes per 64 qubits."""
    per_cell, z1, z2 = _CELL.get(lattice_kind, (1, 2, 2))
    sites = cells * per_cell
    qubits = sites * (2 if model_kind == "hubbard" else 1)
    on_bond, on_next, on_site = _TERMS.get(model_kind, (1, 1, 1))
    terms = (sites * (on_bond * z1 + on_next * z2) // 2 + on_site * sites) * max(1, custom_terms)
    return terms * 2 * 8 * -(-qubits // 64)


class SpecError(ValueError):
    """A model spec that cannot be used; the message is one sentence for the user."""


@dataclass(frozen=True)
class ModelSpec:
    """A validated model spec: lattice, model kind, parameters, custom terms."""

    lattice_kind: str
    size: tuple[int, ...]
    boundary: tuple[str, ...]
    kind: str
    params: tuple[tuple[str, float], ...]
    terms: tuple[Term, ...] = ()
    units: str = "pauli"
    order: str = "row"
    name: str = ""
    particles: tuple[int, int] | None = None  # Hubbard: (spin up, spin down) of the ground-state sector
    text: str = field(default="", compare=False)
    source: str = field(default="<spec>", compare=False)

    @property
    def parameters(self) -> dict[str, float]:
        return {**MODEL_PARAMETERS[self.kind], **dict(self.params)}

    def build(self) -> "Model":
        try:
            lat = build_lattice(self.lattice_kind, self.size, self.boundary, self.order)
            ham = build_hamiltonian(lat, self.kind, dict(self.params), self.terms, self.units)
        except (LatticeError, ModelError) as exc:
            raise SpecError(f"{self.source}: {exc}") from None
        return Model(spec=self, lattice=lat, hamiltonian=ham, qubit_site=qubit_sites(lat, self.kind))


@dataclass(frozen=True, eq=False)
class Model:
    """A built model: its spec, lattice, Hamiltonian and qubit-to-site map."""

    spec: ModelSpec
    lattice: Lattice
    hamiltonian: PauliExpansion
    qubit_site: np.ndarray

    @property
    def n_qubits(self) -> int:
        return self.hamiltonian.n_qubits

    @property
    def n_sites(self) -> int:
        return self.lattice.n_sites

    @property
    def sector(self) -> tuple[int, int] | None:
        """(spin up, spin down) particles of the ground state asked for (Hubbard models), or None: all sectors."""
        return self.spec.particles


def _type_name(value) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
            list: "a list", dict: "a table"}.get(type(value), type(value).__name__)


def _check_keys(where: str, table: dict, allowed, source: str):
    for key in table:
        if key not in allowed:
            raise SpecError(f"{source}: unknown key {key!r} in {where}; allowed: {', '.join(allowed)}")


def _need(table: dict, key: str, where: str, source: str):
    if key not in table:
        raise SpecError(f"{source}: {where} needs the key {key!r}")
    return table[key]


def _number(value, where: str, source: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SpecError(f"{source}: {where} must be a finite number, not {_type_name(value)} ({value!r})")
    return float(value)


def _choice(value, allowed, where: str, source: str) -> str:
    if not isinstance(value, str) or value not in allowed:
        raise SpecError(f"{source}: {where} = {value!r} is not allowed; allowed: {', '.join(allowed)}")
    return value


def parse_spec(text: str, source: str = "<spec>") -> ModelSpec:
    """Validate the TOML text of a model spec."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML: {exc}") from None
    _check_keys("the top level", data, TOP_KEYS, source)
    name = data.get("name", "")
    if not isinstance(name, str):
        raise SpecError(f"{source}: name must be a string")

    lat = _need(data, "lattice", "the spec", source)
    if not isinstance(lat, dict):
        raise SpecError(f"{source}: lattice must be a table ([lattice])")
    _check_keys("[lattice]", lat, LATTICE_KEYS, source)
    lkind = _choice(_need(lat, "kind", "[lattice]", source), LATTICE_KINDS, "lattice.kind", source)
    dims = 1 if lkind in ("chain", "ladder") else 2
    size = _need(lat, "size", "[lattice]", source)
    size = [size] if isinstance(size, int) and not isinstance(size, bool) else size
    if (not isinstance(size, list) or len(size) != dims
            or any(isinstance(s, bool) or not isinstance(s, int) or s < 1 for s in size)):
        raise SpecError(f"{source}: lattice.size must be a list of {dims} positive integer(s) for a "
                        f"{lkind} lattice, got {size!r}")
    boundary = lat.get("boundary", "open")
    if isinstance(boundary, str):
        boundary = [boundary] * dims
    if (not isinstance(boundary, list) or len(boundary) != dims
            or any(b not in BOUNDARIES for b in boundary)):
        raise SpecError(f"{source}: lattice.boundary must be 'open' or 'periodic', or a list of {dims} of "
                        f"them, got {lat.get('boundary')!r}")
    order = _choice(lat.get("order", "row"), ORDERS, "lattice.order", source)
    cells = math.prod(size)  # Python integers: no overflow for absurd sizes
    if cells > MAX_SITES:
        raise SpecError(f"{source}: lattice.size {size} gives {cells} cells; at most {MAX_SITES} are allowed")

    model = _need(data, "model", "the spec", source)
    if not isinstance(model, dict):
        raise SpecError(f"{source}: model must be a table ([model])")
    mkind = _choice(_need(model, "kind", "[model]", source), MODEL_KINDS, "model.kind", source)
    allowed = ("kind", "units", "term") + (("particles",) if mkind == "hubbard" else ()) + tuple(MODEL_PARAMETERS[mkind])
    _check_keys(f"[model] for kind {mkind!r}", model, allowed, source)
    units = _choice(model.get("units", "pauli"), UNITS, "model.units", source)
    params = tuple((k, _number(model[k], f"model.{k}", source)) for k in MODEL_PARAMETERS[mkind] if k in model)

    raw_terms = model.get("term", [])
    if not isinstance(raw_terms, list):
        raise SpecError(f"{source}: model.term must be an array of tables ([[model.term]])")
    terms = []
    for i, t in enumerate(raw_terms, start=1):
        where = f"[[model.term]] number {i}"
        if not isinstance(t, dict):
            raise SpecError(f"{source}: {where} must be a table")
        _check_keys(where, t, TERM_KEYS, source)
        pauli = _need(t, "pauli", where, source)
        on = _choice(t.get("on", "bonds"), TERM_TARGETS, f"{where}: on", source)
        width = 1 if on == "sites" else 2
        if not isinstance(pauli, str) or len(pauli) != width or any(c not in "XYZ" for c in pauli):
            raise SpecError(f"{source}: {where}: pauli = {pauli!r} must be {width} letter(s) from X, Y, Z "
                            f"for on = {on!r}")
        coeff = _number(_need(t, "coefficient", where, source), f"{where}: coefficient", source)
        terms.append(Term(pauli, on, coeff))
    if mkind == "custom" and not terms:
        raise SpecError(f"{source}: a custom model needs at least one [[model.term]]")
    for name, value in params + tuple((f"[[model.term]] {t.pauli}", t.coefficient) for t in terms):
        if abs(value) > MAX_COUPLING:
            raise SpecError(f"{source}: {name} = {value:g} is too large; couplings up to {MAX_COUPLING:g} in "
                            "magnitude keep energies and their squares finite")
    need = pauli_sum_bytes(lkind, cells, mkind, len(terms))
    if need > MAX_PAULI_SUM_BYTES:
        raise SpecError(f"{source}: a {lkind} of size {size} with the {mkind} model needs about "
                        f"{need / 2**30:.1f} GiB for its Pauli sum; at most {MAX_PAULI_SUM_BYTES / 2**30:.0f} GiB "
                        "fit on this machine, so choose a smaller lattice")
    particles = None
    if "particles" in model:
        particles = model["particles"]
        sites = cells * _CELL.get(lkind, (1, 2, 2))[0]
        if (not isinstance(particles, list) or len(particles) != 2
                or any(isinstance(p, bool) or not isinstance(p, int) or not 0 <= p <= sites for p in particles)):
            raise SpecError(f"{source}: model.particles must be [spin up, spin down], two whole numbers from 0 to "
                            f"{sites} (the number of sites), got {particles!r}")
        particles = tuple(particles)
    return ModelSpec(lattice_kind=lkind, size=tuple(size), boundary=tuple(boundary), kind=mkind,
                     params=params, terms=tuple(terms), units=units, order=order, name=name,
                     particles=particles, text=text, source=source)


def read_spec(path: str | os.PathLike) -> ModelSpec:
    """Read and validate a spec file."""
    path = os.fspath(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise SpecError(f"{path}: cannot read the model spec ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise SpecError(f"{path}: the model spec is not UTF-8 text") from None
    return parse_spec(text, source=path)


def load_model(path: str | os.PathLike) -> Model:
    """Read, validate and build the model of a spec file."""
    return read_spec(path).build()
