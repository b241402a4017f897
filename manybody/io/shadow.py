"""Shadow and settings files (DESIGN.md section 8): netCDF-4 through xarray and h5netcdf.

A *settings file* holds what was drawn: the ensemble, one entry per setting
(basis string, gate indices or tableau), the coupling graph and the qubit
to site map. A *shadow file* holds the same plus the measurement records:
for each record its setting, its outcome bits and how many shots gave it.

Layout (dimensions in brackets):

    setting_id [setting]                 int64, the ids used in records and QASM names
    basis [setting, qubit]               uint8, 0 X, 1 Y, 2 Z (local, shallow)
    gate [setting, slot]                 uint16, canonical two-qubit Clifford index (shallow)
    gate_qubits [slot, pair], gate_layer [slot]   qubits and layer of each gate slot
    tableau_x, tableau_z [setting, generator, qubit], tableau_sign [setting, generator] (global)
    coupling [edge, pair]                coupling graph of the device
    qubit_site [qubit]                   lattice site of each qubit
    record_setting [record]              int64, id of the record's setting (as in the CSV)
    outcome [record, outcome_byte]       uint8, the outcome bits packed 8 to a byte: qubit q
                                         is bit q % 8 (least significant first) of byte q // 8;
                                         0 = +1 eigenvalue. Unpack with
                                         numpy.unpackbits(outcome, axis=1, bitorder="little")[:, :n]
    count [record]                       uint32 shots with this outcome

Attributes: ``file_kind`` ("manybody settings" or "manybody shadow"),
``schema_version``, ``ensemble``, ``depth``, ``n_qubits``, ``model_spec``
(TOML text), ``label`` (JSON object, e.g. {"time": 0.5}), ``metadata``
(JSON object: noise, truncation, ...), ``seed``, ``source``, ``created``,
``tool_version``. Writes are atomic (temporary file, then rename).
"""

from __future__ import annotations

import datetime as _dt
import json
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field, replace

import numpy as np
import xarray as xr

from manybody import __version__
from manybody.errors import InputError
from manybody.io.files import settle, temporary_beside
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, Settings, ShallowEnsemble

SCHEMA_VERSION = 1
SETTINGS_KIND = "manybody settings"
SHADOW_KIND = "manybody shadow"


@dataclass(frozen=True, eq=False)
class Shadow:
    """Settings plus records of one randomized-measurement experiment.

    ``record_setting``, ``outcomes`` and ``counts`` may be numpy arrays or lazy
    xarray variables; :meth:`chunks` reads them piece by piece. ``outcomes``
    holds one bit per qubit, or the file's packed bytes when ``packed``.
    """

    ensemble: object
    settings: Settings
    qubit_site: np.ndarray
    record_setting: object = None
    outcomes: object = None
    counts: object = None
    model_spec: str = ""
    label: dict = field(default_factory=dict)
    metadata: dict = field(default_factory=dict)
    seed: int | None = None
    source: str = ""
    packed: bool = False

    @property
    def n_qubits(self) -> int:
        return self.ensemble.n_qubits

    @property
    def n_records(self) -> int:
        return 0 if self.counts is None else int(self.counts.shape[0])

    @property
    def n_snapshots(self) -> int:
        return 0 if self.counts is None else int(np.asarray(self.counts).sum(dtype=np.int64))

    def records(self, size: int = 1 << 16):
        """Yield (setting ids, outcomes, counts) as numpy arrays, ``size`` records at a time."""
        for start in range(0, self.n_records, size):
            sl = slice(start, start + size)
            outcomes = np.asarray(self.outcomes[sl], dtype=np.uint8)
            if self.packed:
                outcomes = unpack_outcomes(outcomes, self.n_qubits)
            yield (np.asarray(self.record_setting[sl], dtype=np.int64), outcomes,
                   np.asarray(self.counts[sl], dtype=np.int64))

    def chunks(self, size: int = 1 << 16):
        """Yield (setting positions in ``settings``, outcomes, counts), ``size`` records at a time."""
        ids = np.asarray(self.settings.ids)
        order = np.argsort(ids, kind="stable")
        identity = np.array_equal(ids, np.arange(len(ids)))
        for setting_ids, outcomes, counts in self.records(size):
            if identity:
                yield setting_ids, outcomes, counts
            else:
                yield order[np.searchsorted(ids[order], setting_ids)], outcomes, counts

    def snapshots(self) -> tuple[np.ndarray, np.ndarray]:
        """All snapshots in memory, one row each: (setting positions, outcome bits); counts expanded."""
        parts = [(np.repeat(p, c), np.repeat(b, c, axis=0)) for p, b, c in self.chunks()]
        if not parts:
            return np.zeros(0, dtype=np.int64), np.zeros((0, self.n_qubits), dtype=np.uint8)
        return np.concatenate([p for p, _ in parts]), np.concatenate([b for _, b in parts])

    def with_records(self, record_setting, outcomes, counts, **changes) -> "Shadow":
        return replace(self, record_setting=record_setting, outcomes=outcomes, counts=counts, **changes)


# ----------------------------------------------------------------- writing
def pack_outcomes(bits: np.ndarray) -> np.ndarray:
    """(R, n) bits -> (R, ceil(n/8)) bytes, qubit q at bit q % 8 of byte q // 8."""
    return np.packbits(np.asarray(bits, dtype=np.uint8), axis=1, bitorder="little")


def unpack_outcomes(packed: np.ndarray, n_qubits: int) -> np.ndarray:
    return np.unpackbits(packed, axis=1, bitorder="little", count=n_qubits)


def _attrs(shadow: Shadow, kind: str, created: str | None) -> dict:
    ens = shadow.ensemble
    return {
        "file_kind": kind, "schema_version": SCHEMA_VERSION, "ensemble": ens.kind,
        "depth": int(ens.depth), "n_qubits": int(ens.n_qubits), "model_spec": shadow.model_spec,
        "label": json.dumps(shadow.label), "metadata": json.dumps(shadow.metadata),
        "seed": "" if shadow.seed is None else str(shadow.seed), "source": shadow.source,
        "created": created or _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "tool_version": __version__,
    }


def _settings_variables(shadow: Shadow) -> dict:
    """name -> (dims, array, attrs) for everything but the records."""
    ens, st = shadow.ensemble, shadow.settings
    data = {"setting_id": (("setting",), np.asarray(st.ids, dtype=np.int64), {}),
            "qubit_site": (("qubit",), np.asarray(shadow.qubit_site, dtype=np.int64), {})}
    if st.basis is not None:
        data["basis"] = (("setting", "qubit"), np.asarray(st.basis, dtype=np.uint8),
                         {"flag_values": np.array([0, 1, 2], dtype=np.uint8), "flag_meanings": "X Y Z"})
    if ens.kind == "shallow":
        data["gate"] = (("setting", "slot"), np.asarray(st.gates, dtype=np.uint16),
                        {"meaning": "canonical two-qubit Clifford index (manybody.clifford)"})
        data["gate_qubits"] = (("slot", "pair"), ens.gate_qubits, {})
        data["gate_layer"] = (("slot",), ens.gate_layer, {})
        data["coupling"] = (("edge", "pair"), ens.coupling, {})
    if ens.kind == "global":
        data["tableau_x"] = (("setting", "generator", "qubit"), np.asarray(st.tableau_x, dtype=np.uint8), {})
        data["tableau_z"] = (("setting", "generator", "qubit"), np.asarray(st.tableau_z, dtype=np.uint8), {})
        data["tableau_sign"] = (("setting", "generator"), np.asarray(st.tableau_sign, dtype=np.int8), {})
    return data


class ShadowWriter:
    """Atomic, streamed writer of settings and shadow files.

        with ShadowWriter(path) as out:
            out.append(setting_ids, outcomes, counts)   # any number of times
            out.finish(shadow)                          # settings and attributes

    Records go to a temporary file next to ``path`` as they come (memory stays
    flat); the file is renamed to ``path`` only when the block ends without
    an error, so an existing file is never half overwritten.
    """

    def __init__(self, path, chunk_records: int = 1 << 16, created: str | None = None):
        self.path = os.fspath(path)
        self.chunk_records = chunk_records
        self.created = created
        self._file = None
        self._tmp = None
        self._records = 0
        self._finished = False

    def __enter__(self):
        import h5netcdf

        self._tmp = temporary_beside(self.path, ".nc")
        self._file = h5netcdf.File(self._tmp, "w")
        self._pool = ThreadPoolExecutor(max_workers=1)  # h5py releases the GIL while compressing
        self._pending = []
        return self

    def _create_records(self, n_qubits: int):
        f = self._file
        f.dimensions["record"] = None
        if "qubit" not in f.dimensions:
            f.dimensions["qubit"] = n_qubits
        f.dimensions["outcome_byte"] = -(-n_qubits // 8)
        c = self.chunk_records
        opts = {"compression": "gzip", "compression_opts": 1, "shuffle": True}
        f.create_variable("record_setting", ("record",), dtype="i8", chunks=(c,), **opts).attrs["meaning"] = \
            "id of the record's setting (setting_id)"
        var = f.create_variable("outcome", ("record", "outcome_byte"), dtype="u1",
                                chunks=(c, f.dimensions["outcome_byte"].size), **opts)
        var.attrs["meaning"] = ("outcome bits packed 8 to a byte, qubit q at bit q % 8 (least significant "
                                "first) of byte q // 8; bit 0 = +1 eigenvalue of the measured Pauli")
        f.create_variable("count", ("record",), dtype="u4", chunks=(c,), **opts)

    def append(self, setting_ids, outcomes, counts) -> None:
        """Queue records for writing; a background thread compresses and writes them in order."""
        outcomes = np.asarray(outcomes, dtype=np.uint8)
        if self._records == 0 and "outcome" not in self._file.variables:
            self._create_records(outcomes.shape[1])
        start, stop = self._records, self._records + len(outcomes)
        self._records = stop
        while len(self._pending) >= 2:  # bounded: memory stays flat
            self._pending.pop(0).result()
        self._pending.append(self._pool.submit(
            self._write, start, stop, np.asarray(setting_ids, dtype=np.int64), pack_outcomes(outcomes),
            np.asarray(counts, dtype=np.uint32)))

    def _write(self, start, stop, setting_ids, packed, counts):
        self._file.resize_dimension("record", stop)
        self._file.variables["record_setting"][start:stop] = setting_ids
        self._file.variables["outcome"][start:stop] = packed
        self._file.variables["count"][start:stop] = counts

    def _drain(self):
        while self._pending:
            self._pending.pop(0).result()

    def finish(self, shadow: Shadow, with_records: bool | None = None) -> None:
        """Write the settings and attributes; records must all have been appended."""
        self._drain()
        f = self._file
        if with_records is None:
            with_records = self._records > 0 or shadow.counts is not None
        if with_records and "outcome" not in f.variables:
            self._create_records(shadow.n_qubits)
        data = _settings_variables(shadow)
        for name, (dims, values, _) in data.items():
            for d, size in zip(dims, values.shape):
                if d not in f.dimensions:
                    f.dimensions[d] = size
        for name, (dims, values, attrs) in data.items():
            kw = {"compression": "gzip", "compression_opts": 4} if values.ndim and values.size > 1024 else {}
            var = f.create_variable(name, dims, dtype=values.dtype, **kw)
            var[...] = values
            for key, value in attrs.items():
                var.attrs[key] = value
        kind = SHADOW_KIND if with_records else SETTINGS_KIND
        for key, value in _attrs(shadow, kind, self.created).items():
            f.attrs[key] = value
        self._finished = True

    def __exit__(self, exc_type, exc, tb):
        ok = exc_type is None and self._finished
        try:
            self._drain()
        except BaseException:
            ok = False
            if exc_type is None:
                raise
        finally:
            self._pool.shutdown(wait=True)
            self._file.close()
            settle(self._tmp, self.path, keep=ok)
        if exc_type is None and not self._finished:
            raise RuntimeError("ShadowWriter closed without finish(): nothing was written")
        return False


def write_shadow(shadow: Shadow, path, chunk_records: int = 1 << 16) -> None:
    """Write a shadow (or, without records, a settings file) atomically."""
    with ShadowWriter(path, chunk_records) as out:
        if shadow.counts is not None:
            for ids, outcomes, counts in shadow.records(chunk_records):
                out.append(ids, outcomes, counts)
        out.finish(shadow)


# ----------------------------------------------------------------- reading
def open_dataset_checked(path, kinds=(SHADOW_KIND, SETTINGS_KIND)) -> xr.Dataset:
    """Open a manybody netCDF file lazily; bad files raise InputError with one sentence."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise InputError(f"{path}: no such file")
    try:
        ds = xr.open_dataset(path, engine="h5netcdf", cache=False)
    except Exception as exc:  # h5py and xarray raise many kinds for broken files
        raise InputError(f"{path}: not a readable netCDF-4 file ({type(exc).__name__}: "
                         f"{str(exc).splitlines()[0] if str(exc) else 'no detail'})") from None
    kind = ds.attrs.get("file_kind")
    if kind not in (SHADOW_KIND, SETTINGS_KIND):
        ds.close()
        raise InputError(f"{path}: not a manybody file (attribute file_kind is missing or foreign)")
    version = int(ds.attrs.get("schema_version", -1))
    if version > SCHEMA_VERSION:
        ds.close()
        raise InputError(f"{path}: written with schema version {version} by a newer manybody; "
                         f"this version reads up to schema version {SCHEMA_VERSION}")
    if version < 1:
        ds.close()
        raise InputError(f"{path}: attribute schema_version is missing or invalid")
    if kind not in kinds:
        ds.close()
        want = " or ".join(kinds)
        raise InputError(f"{path}: is a {kind} file, expected a {want} file")
    return ds


def _need(ds, name, path):
    if name not in ds.variables:
        raise InputError(f"{path}: variable {name!r} is missing")
    return ds[name]


def read_shadow(path, kinds=(SHADOW_KIND, SETTINGS_KIND)) -> Shadow:
    """Read settings eagerly and records lazily (see :meth:`Shadow.chunks`)."""
    path = os.fspath(path)
    ds = open_dataset_checked(path, kinds)
    try:
        n = int(ds.attrs["n_qubits"])
        kind = ds.attrs["ensemble"]
        ids = _need(ds, "setting_id", path).values
        if kind == "local":
            ens = LocalEnsemble(n)
            st = Settings(ids, basis=_need(ds, "basis", path).values)
        elif kind == "shallow":
            ens = ShallowEnsemble(n, int(ds.attrs["depth"]), _need(ds, "coupling", path).values)
            st = Settings(ids, basis=_need(ds, "basis", path).values, gates=_need(ds, "gate", path).values)
            if not np.array_equal(ens.gate_qubits, _need(ds, "gate_qubits", path).values):
                raise InputError(f"{path}: gate_qubits do not match the layers of the stored coupling graph")
        elif kind == "global":
            ens = GlobalEnsemble(n)
            st = Settings(ids, tableau_x=_need(ds, "tableau_x", path).values,
                          tableau_z=_need(ds, "tableau_z", path).values,
                          tableau_sign=_need(ds, "tableau_sign", path).values)
        else:
            raise InputError(f"{path}: unknown ensemble {kind!r}; allowed: local, shallow, global")
        seed = ds.attrs.get("seed", "")
        shadow = Shadow(
            ensemble=ens, settings=st, qubit_site=_need(ds, "qubit_site", path).values,
            model_spec=str(ds.attrs.get("model_spec", "")), label=json.loads(ds.attrs.get("label", "{}")),
            metadata=json.loads(ds.attrs.get("metadata", "{}")), seed=int(seed) if seed else None,
            source=str(ds.attrs.get("source", "")))
        if ds.attrs["file_kind"] == SHADOW_KIND:
            shadow = shadow.with_records(_need(ds, "record_setting", path).variable,
                                         _need(ds, "outcome", path).variable, _need(ds, "count", path).variable,
                                         packed=True)
        return shadow
    except InputError:
        raise
    except (KeyError, ValueError) as exc:
        raise InputError(f"{path}: damaged manybody file ({exc})") from None
