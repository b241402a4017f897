"""What every accumulator sees: the fixed facts of one estimate (Setup) and one chunk of snapshots (Chunk).

The Setup is built once per shadow: qubits and sites, the eigenvalues
(ideal or calibrated), the blocks of whole settings for the error bars and
whether settings carry several shots. A Chunk holds the snapshots of one
read and computes, once and on demand, what several accumulators share: the
one-site estimator columns and, for circuit ensembles, the values of the
two-site Paulis whose light cones overlap.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from manybody.errors import InputError
from manybody.estimation.kernels import local_columns
from manybody.estimation.sums import block_grams, block_runs
from manybody.measure.paulis import BASIS_PAULI, single_site_codes


@dataclass(frozen=True)
class Subsystem:
    """A subsystem by its label as written (e.g. "0-3" or "0,2,5") and its sites."""

    label: str
    sites: tuple[int, ...]


def parse_subsystems(text: str | None, n_sites: int, argument: str = "subsystems") -> list[Subsystem]:
    """'a-b' ranges or 'a,b,c' lists separated by ';' (docs/formats.md); 'profile' = 0;0-1;...;0-(n/2-1)."""
    if not text:
        return []
    if text.strip() == "profile":  # the entropy profile: intervals 0..k-1 up to half the system
        text = ";".join(f"0-{k}" if k else "0" for k in range(max(n_sites // 2, 1)))
    out = []
    for part in text.split(";"):
        label = part.strip()
        if label:
            out.append(subsystem_of(label, indices_of_label(label, argument), n_sites, argument))
    return out


def indices_of_label(label: str, argument: str, unit: str = "sites") -> tuple[int, ...]:
    """The numbers of an inclusive range 'a-b' or a list 'a,b,c' (sites of a subsystem, qubits of an overlap)."""
    try:
        if "-" in label and "," not in label:
            a, b = (int(x) for x in label.split("-"))
            if b < a:
                raise ValueError
            return tuple(range(a, b + 1))
        return tuple(int(x) for x in label.split(","))
    except ValueError:
        raise InputError(f"{argument} {label!r}: expected an inclusive range a-b or a list a,b,c of {unit}",
                         argument=argument) from None


def subsystem_of(label: str, sites, n_sites: int, argument: str = "subsystems") -> Subsystem:
    """A checked Subsystem: sites distinct and on the lattice."""
    sites = tuple(int(s) for s in sites)
    if len(set(sites)) != len(sites):
        raise InputError(f"{argument} {label!r}: a site is repeated", argument=argument)
    bad = [s for s in sites if not 0 <= s < n_sites]
    if bad:
        raise InputError(f"{argument} {label!r}: site {bad[0]} is outside the lattice (sites 0 to {n_sites - 1})",
                         argument=argument)
    return Subsystem(label, sites)


class Eigenvalues:
    """lambda_P of the shadow's ensemble, or calibrated (robust) values when given."""

    def __init__(self, ensemble, calibrated=None):
        self.ensemble = ensemble
        self.calibrated = calibrated  # a manybody.estimation.calibration.Calibration, or None
        self._cache: dict[bytes, float] = {}  # support -> lambda

    def of(self, codes) -> float:
        return self.of_support(np.asarray(codes) != 0)

    def of_support(self, support) -> float:
        """lambda of a support (boolean mask over the qubits), each support computed once per estimate."""
        support = np.asarray(support, dtype=bool)
        key = np.packbits(support).tobytes() + bytes([len(support) % 8])
        if key not in self._cache:
            source = self.calibrated if self.calibrated is not None else self.ensemble
            self._cache[key] = source.eigenvalue(support)
        return self._cache[key]

    def inv_local(self, n: int) -> np.ndarray:
        """1/lambda of each qubit for the local ensemble (3 without calibration)."""
        if self.calibrated is not None:
            return self.calibrated.inv_local
        return np.full(n, 3.0)


@dataclass
class Setup:
    """The fixed facts of one estimate, shared by all accumulators."""

    shadow: object
    model: object
    lam: Eigenvalues
    qubit_site: np.ndarray
    setting_block: np.ndarray  # block of each setting (-1: no snapshots)
    n_blocks: int
    multi: bool  # some setting has more than one shot
    subsystems: list = field(default_factory=list)
    setting_shots: np.ndarray | None = None  # snapshots of each setting

    def with_shadow(self, shadow) -> "Setup":
        """The same setup over another copy of the shadow (None: to be opened by a dask worker)."""
        from dataclasses import replace

        return replace(self, shadow=shadow)

    @property
    def ensemble(self):
        return self.shadow.ensemble

    @property
    def settings(self):
        return self.shadow.settings

    @property
    def n_qubits(self) -> int:
        return self.ensemble.n_qubits

    @property
    def n_settings(self) -> int:
        return len(self.shadow.settings)

    @property
    def n_sites(self) -> int:
        return int(self.qubit_site.max()) + 1

    @property
    def spin_like(self) -> bool:
        """One qubit per site: per-site maps (magnetization, correlations, MI) are per qubit."""
        return self.n_sites == self.n_qubits

    @property
    def local(self) -> bool:
        return self.ensemble.is_local

    @property
    def calibrated(self) -> bool:
        return self.lam.calibrated is not None

    def qubits_of(self, subsystem) -> np.ndarray:
        return np.flatnonzero(np.isin(self.qubit_site, subsystem.sites))

    @cached_property
    def near_pairs(self) -> list[tuple[int, int]]:
        """Qubit pairs whose single-site light cones overlap (global: every pair; local: none)."""
        n = self.n_qubits
        if self.local:
            return []
        if self.ensemble.kind == "global":
            return [(a, b) for a in range(n) for b in range(a + 1, n)]
        from manybody.measure.eigenvalues import light_cone

        cones = [set(light_cone([q], self.ensemble.layers)[0]) for q in range(n)]
        return [(a, b) for a in range(n) for b in range(a + 1, n) if cones[a] & cones[b]]


class Chunk:
    """The snapshots of one read: setting positions, outcome bits, and their blocks."""

    def __init__(self, setup: Setup, pos: np.ndarray, bits: np.ndarray):
        self.setup = setup
        self.pos, self.bits = pos, bits
        self.blocks = setup.setting_block[pos]
        self.onehot = np.zeros((len(pos), setup.n_blocks))
        self.onehot[np.arange(len(pos)), self.blocks] = 1.0
        settings = setup.settings
        self.basis = settings.basis[pos] if settings.basis is not None else None
        used, self.where = np.unique(pos, return_inverse=True)
        self.settings = settings.take(used)  # circuits are propagated for the settings of this chunk only

    def __len__(self) -> int:
        return len(self.pos)

    @cached_property
    def runs(self):
        return block_runs(self.blocks)

    @cached_property
    def block_index(self) -> np.ndarray:
        return np.argmax(self.onehot, axis=1)

    def values(self, codes) -> np.ndarray:
        """Single-snapshot estimates <b|U P U^dag|b> / lambda_P of one Pauli string: (N,) float."""
        ens = self.setup.ensemble
        return ens.snapshot_values(codes, self.settings, self.where, self.bits) / self.setup.lam.of(codes)

    def values_many(self, codes, lam=None) -> np.ndarray:
        """Single-snapshot estimates of many Pauli strings (S, n), propagated together: (N, S) float.

        ``lam`` (S,) are their eigenvalues when already known.
        """
        codes = np.atleast_2d(codes)
        lam = np.array([self.setup.lam.of(c) for c in codes]) if lam is None else np.asarray(lam)
        raw = self.setup.ensemble.snapshot_values_many(codes, self.settings, self.where, self.bits)
        return raw / lam

    @cached_property
    def columns(self) -> np.ndarray:
        """One-site estimates f[s, axis, q] of sigma^axis_q: (N, 3, n).

        Local ensemble: 3 [basis = axis] (-1)^b (calibrated: 1/lambda_q), in
        float32 where that is exact (entries +-3 and their sums below 2^24).
        """
        setup = self.setup
        n = setup.n_qubits
        if setup.local:
            exact32 = not setup.calibrated and len(self.pos) * 9 < 2**24
            return local_columns(self.basis, self.bits, setup.lam.inv_local(n), np.float32 if exact32 else np.float64)
        codes = np.array([single_site_codes(q, a, n) for a in range(3) for q in range(n)])
        return self.values_many(codes).reshape(len(self.pos), 3, n)

    @cached_property
    def column_grams(self) -> list:
        """(block, f^T f) of the one-site columns per run of one block: shared by correlations and MI maps."""
        return block_grams(self.runs, self.columns.reshape(len(self), -1))

    @cached_property
    def near_values(self) -> np.ndarray:
        """Circuit ensembles: estimates of sigma^a_qa sigma^b_qb for the near pairs: (N, pairs, 3, 3)."""
        n = self.setup.n_qubits
        pairs = self.setup.near_pairs
        codes = np.zeros((len(pairs), 3, 3, n), dtype=np.uint8)
        for j, (qa, qb) in enumerate(pairs):
            codes[j, :, :, qa] = BASIS_PAULI[:, None]
            codes[j, :, :, qb] = BASIS_PAULI[None, :]
        if not len(pairs):
            return np.zeros((len(self.pos), 0, 3, 3))
        return self.values_many(codes.reshape(-1, n)).reshape(len(self.pos), len(pairs), 3, 3)
