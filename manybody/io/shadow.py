"""Shadow and settings files (docs/design.md section 8, docs/formats.md): netCDF-4 through xarray and h5netcdf.

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
    count [record]                       uint64 shots with this outcome, at most 10^15 - 1
                                         (older files hold uint32; both are read)

Attributes: ``file_kind`` ("manybody settings" or "manybody shadow"),
``schema_version``, ``ensemble``, ``depth``, ``n_qubits``, ``model_spec``
(TOML text), ``label`` (JSON object, e.g. {"time": 0.5}), ``metadata``
(JSON object: noise, truncation, ...), ``seed``, ``source``, ``created``,
``tool_version``. Writes are atomic (temporary file, then rename); a
failed write (disk full, read-only folder) is an InputError and leaves no
temporary file. Reading checks attributes and settings when the file is
opened and the records chunk by chunk (:mod:`manybody.io.validate`).
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
from manybody.io import validate as check
from manybody.io.files import GuardedFile, discard, settle, temporary_beside, write_error
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
    origin: str = ""  # the file it was read from, for messages

    @property
    def n_qubits(self) -> int:
        return self.ensemble.n_qubits

    @property
    def n_records(self) -> int:
        return 0 if self.counts is None else int(self.counts.shape[0])

    @property
    def n_snapshots(self) -> int:
        if self.counts is None:
            return 0
        lookup, total = check.RecordCheck(np.zeros(0), self.origin), 0
        for start in range(0, self.n_records, 1 << 20):
            counts = lookup.counts(self._read(self.counts, start, 1 << 20, "count"), start)
            exact = len(counts) == 0 or int(counts.max()) * len(counts) < 2**63  # int64 sum cannot wrap
            total += int(counts.sum()) if exact else int(counts.astype(object).sum())
        return total

    def _read(self, array, start: int, size: int, name: str, index=None) -> np.ndarray:
        """array[start:start + size] (or array[index], records start to start + size - 1) as numpy.

        A damaged file (a chunk that fails to inflate) is an InputError.
        """
        try:
            return np.asarray(array[start:start + size] if index is None else array[index])
        except (OSError, RuntimeError, ValueError) as exc:
            reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise InputError(f"{self.origin or 'the shadow'}: variable {name} cannot be read at records {start} to "
                             f"{min(start + size, self.n_records) - 1}; the file is damaged ({reason})") from None

    def pick(self, records) -> tuple[np.ndarray, np.ndarray]:
        """(setting positions in ``settings``, outcome bits) of the given records (increasing), one read each.

        For a few records spread over a large file, where reading them chunk by chunk would read it all.
        """
        records = np.asarray(records, dtype=np.int64)
        if not len(records):
            return np.zeros(0, dtype=np.int64), np.zeros((0, self.n_qubits), dtype=np.uint8)
        first, size = int(records[0]), int(records[-1] - records[0] + 1)
        ids = self._read(self.record_setting, first, size, "record_setting", records)
        try:
            positions = check.RecordCheck(self.settings.ids, self.origin).positions(ids, 0)
        except InputError:  # read the records one by one, so that the message names the right one
            for r in records:
                next(self._checked(1, False, int(r), int(r) + 1))
            raise
        bits = self._read(self.outcomes, first, size, "outcome", records).astype(np.uint8, copy=False)
        return positions, unpack_outcomes(bits, self.n_qubits) if self.packed else bits

    def _checked(self, size: int, outcomes: bool = True, start: int = 0, stop: int | None = None):
        """(setting ids, positions in ``settings``, outcomes or None, counts) per chunk, ids and counts checked.

        Records ``start`` to ``stop`` (default: all); messages number records from the start of the file.
        """
        lookup = check.RecordCheck(self.settings.ids, self.origin)
        stop = self.n_records if stop is None else min(stop, self.n_records)
        for first in range(start, stop, size):
            step = min(size, stop - first)
            ids = self._read(self.record_setting, first, step, "record_setting")
            positions = lookup.positions(ids, first)
            counts = lookup.counts(self._read(self.counts, first, step, "count"), first)
            bits = None
            if outcomes:
                bits = self._read(self.outcomes, first, step, "outcome").astype(np.uint8, copy=False)
                if self.packed:
                    bits = unpack_outcomes(bits, self.n_qubits)
            yield ids.astype(np.int64, copy=False), positions, bits, counts

    def records(self, size: int = 1 << 16):
        """Yield (setting ids, outcomes, counts) as numpy arrays, ``size`` records at a time."""
        for ids, _, bits, counts in self._checked(size):
            yield ids, bits, counts

    def chunks(self, size: int = 1 << 16, start: int = 0, stop: int | None = None, outcomes: bool = True):
        """Yield (setting positions in ``settings``, outcomes, counts), ``size`` records at a time.

        Records ``start`` to ``stop`` (default: all); ``outcomes=False`` yields
        None for the outcomes and does not read them. Raises InputError at the
        first record whose setting is not in the settings or whose count is
        negative or above 10^15 - 1.
        """
        for _, positions, bits, counts in self._checked(size, outcomes, start, stop):
            yield positions, bits, counts

    def snapshots(self) -> tuple[np.ndarray, np.ndarray]:
        """All snapshots in memory, one row each: (setting positions, outcome bits); counts expanded."""
        parts = [(np.repeat(p, c), np.repeat(b, c, axis=0)) for p, b, c in self.chunks()]
        if not parts:
            return np.zeros(0, dtype=np.int64), np.zeros((0, self.n_qubits), dtype=np.uint8)
        return np.concatenate([p for p, _ in parts]), np.concatenate([b for _, b in parts])

    def with_records(self, record_setting, outcomes, counts, **changes) -> "Shadow":
        return replace(self, record_setting=record_setting, outcomes=outcomes, counts=counts, **changes)

    @property
    def model(self):
        """The model whose spec is stored with the shadow (None without one)."""
        if not self.model_spec:
            return None
        from hamiltonians.spec import SpecError, parse_spec

        try:
            return parse_spec(self.model_spec, source=f"{self.source or 'the shadow'} (stored model spec)").build()
        except SpecError as exc:
            raise InputError(str(exc), argument="model") from None

    def to_netcdf(self, path) -> None:
        """Write the shadow (or, without records, its settings) to a netCDF file, atomically."""
        write_shadow(self, path)


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

        self._tmp = temporary_beside(self.path, ".nc")  # InputError when the folder cannot be written
        try:  # HDF5 writes through a guarded file: a full disk cannot leave it in a state that crashes
            self._sink = GuardedFile(self._open_raw(self._tmp), self.path)
            self._file = h5netcdf.File(self._sink, "w")
        except OSError as exc:
            discard(self._tmp)
            raise write_error(self.path, exc) from None
        self._pool = ThreadPoolExecutor(max_workers=1)  # h5py releases the GIL while compressing
        self._pending = []
        return self

    @staticmethod
    def _open_raw(tmp):
        """The real file under the guarded one (unbuffered: every failure reaches the guard at once)."""
        return open(tmp, "r+b", buffering=0)

    def _create_records(self, n_qubits: int):
        f = self._file
        f.dimensions["record"] = None
        if "qubit" not in f.dimensions:
            f.dimensions["qubit"] = n_qubits
        f.dimensions["outcome_byte"] = -(-n_qubits // 8)
        c = self.chunk_records
        # Fletcher-32 checksums per chunk: a damaged record chunk is refused, never read as other values
        opts = {"compression": "gzip", "compression_opts": 1, "shuffle": True, "fletcher32": True}
        f.create_variable("record_setting", ("record",), dtype="i8", chunks=(c,), **opts).attrs["meaning"] = \
            "id of the record's setting (setting_id)"
        var = f.create_variable("outcome", ("record", "outcome_byte"), dtype="u1",
                                chunks=(c, f.dimensions["outcome_byte"].size), **opts)
        var.attrs["meaning"] = ("outcome bits packed 8 to a byte, qubit q at bit q % 8 (least significant "
                                "first) of byte q // 8; bit 0 = +1 eigenvalue of the measured Pauli")
        f.create_variable("count", ("record",), dtype="u8", chunks=(c,), **opts)

    def append(self, setting_ids, outcomes, counts) -> None:
        """Queue records for writing; a background thread compresses and writes them in order."""
        outcomes = np.asarray(outcomes, dtype=np.uint8)
        counts = np.asarray(counts)
        if len(counts) and (counts.min() < 0 or counts.max() > check.MAX_COUNT):
            raise ValueError(f"counts must lie between 0 and {check.MAX_COUNT}")
        try:
            if self._records == 0 and "outcome" not in self._file.variables:
                self._create_records(outcomes.shape[1])
        except OSError as exc:
            raise write_error(self.path, exc) from None
        start, stop = self._records, self._records + len(outcomes)
        self._records = stop
        while len(self._pending) >= 2:  # bounded: memory stays flat
            self._pending.pop(0).result()
        self._pending.append(self._pool.submit(
            self._write, start, stop, np.asarray(setting_ids, dtype=np.int64), pack_outcomes(outcomes),
            counts.astype(np.uint64)))

    def _write(self, start, stop, setting_ids, packed, counts):
        try:
            self._file.resize_dimension("record", stop)
            self._file.variables["record_setting"][start:stop] = setting_ids
            self._file.variables["outcome"][start:stop] = packed
            self._file.variables["count"][start:stop] = counts
        except OSError as exc:  # disk full, quota, I/O error
            raise write_error(self.path, exc) from None
        self._sink.raise_failure()

    def _drain(self):
        while self._pending:
            self._pending.pop(0).result()

    def finish(self, shadow: Shadow, with_records: bool | None = None) -> None:
        """Write the settings and attributes; records must all have been appended."""
        self._drain()
        if with_records is None:
            with_records = self._records > 0 or shadow.counts is not None
        try:
            self._write_settings(shadow, with_records)
        except OSError as exc:
            raise write_error(self.path, exc) from None
        self._sink.raise_failure()
        self._finished = True

    def _write_settings(self, shadow: Shadow, with_records: bool) -> None:
        f = self._file
        if with_records and "outcome" not in f.variables:
            self._create_records(shadow.n_qubits)
        data = _settings_variables(shadow)
        for name, (dims, values, _) in data.items():
            for d, size in zip(dims, values.shape):
                if d not in f.dimensions:
                    f.dimensions[d] = size
        for name, (dims, values, attrs) in data.items():
            kw = ({"compression": "gzip", "compression_opts": 4, "fletcher32": True}
                  if values.ndim and values.size > 1024 else {})
            var = f.create_variable(name, dims, dtype=values.dtype, **kw)
            var[...] = values
            for key, value in attrs.items():
                var.attrs[key] = value
        kind = SHADOW_KIND if with_records else SETTINGS_KIND
        for key, value in _attrs(shadow, kind, self.created).items():
            f.attrs[key] = value

    def __exit__(self, exc_type, exc, tb):
        ok = exc_type is None and self._finished
        failure = None
        try:
            self._drain()
        except BaseException as err:  # a write that failed in the background
            ok, failure = False, err
        finally:
            self._pool.shutdown(wait=True)
            try:
                self._file.close()  # flushes through the guarded file, which keeps any failure
            except Exception as err:  # noqa: BLE001 - h5py raises OSError or RuntimeError here
                failure = failure or write_error(self.path, err)
            self._sink.close()
            try:
                self._sink.raise_failure()
            except BaseException as err:
                failure = failure or err
            if ok and failure is None:
                settle(self._tmp, self.path, keep=True)  # InputError (and no temporary) if the rename fails
            else:
                discard(self._tmp)
        if exc_type is None and failure is not None:
            raise failure
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
    if os.path.isdir(path):
        raise InputError(f"{path}: is a folder; expected a netCDF-4 file")
    try:
        ds = xr.open_dataset(path, engine="h5netcdf", cache=False)
    except Exception as exc:  # noqa: BLE001 - h5py and xarray raise many kinds for broken files
        raise InputError(f"{path}: not a readable netCDF-4 file ({type(exc).__name__}: "
                         f"{str(exc).splitlines()[0] if str(exc) else 'no detail'})") from None
    try:
        _check_kind(ds.attrs, path, kinds)
    except BaseException:
        ds.close()
        raise
    return ds


def _check_kind(attrs, path, kinds) -> None:
    kind = attrs.get("file_kind")
    if not isinstance(kind, str) or kind not in (SHADOW_KIND, SETTINGS_KIND):
        raise InputError(f"{path}: not a manybody file (attribute file_kind is missing or foreign)")
    if "schema_version" not in attrs:
        raise InputError(f"{path}: attribute schema_version is missing")
    version = attrs["schema_version"]
    if isinstance(version, (int, np.integer)) and not isinstance(version, (bool, np.bool_)) \
            and version > SCHEMA_VERSION:
        raise InputError(f"{path}: written with schema version {version} by a newer manybody; "
                         f"this version reads up to schema version {SCHEMA_VERSION}")
    check.int_attr(attrs, "schema_version", path, 1, SCHEMA_VERSION)
    if kind not in kinds:
        want = " or ".join(kinds)
        raise InputError(f"{path}: is a {kind} file, expected a {want} file")


def _ensemble_and_settings(ds, path):
    """The ensemble and its settings from the attributes and settings variables, all checked."""
    attrs = ds.attrs
    n = check.int_attr(attrs, "n_qubits", path, 1, check.MAX_QUBITS)
    kind = check.text_attr(attrs, "ensemble", path)
    if kind not in ("local", "shallow", "global"):
        raise InputError(f"{path}: attribute ensemble is {kind!r}; allowed: local, shallow, global")
    ids = check.setting_ids(ds, path)
    if kind == "local":
        ens = LocalEnsemble(n)
    elif kind == "shallow":
        depth = check.int_attr(attrs, "depth", path, 0, 10_000)
        ens = ShallowEnsemble(n, depth, check.coupling(ds, path, n))
        try:
            gate_qubits = ens.gate_qubits
        except ValueError as exc:
            raise InputError(f"{path}: attribute depth is {depth} but variable coupling does not allow it "
                             f"({exc})") from None
        if not np.array_equal(gate_qubits, check.variable(ds, "gate_qubits", path, ("slot", "pair"))):
            raise InputError(f"{path}: gate_qubits do not match the layers of the stored coupling graph")
    else:
        ens = GlobalEnsemble(n)
    arrays = check.settings_arrays(ds, path, kind, n, len(ids), len(getattr(ens, "gate_qubits", ())))
    return ens, Settings(ids, **arrays)


def read_shadow(path, kinds=(SHADOW_KIND, SETTINGS_KIND)) -> Shadow:
    """Read settings eagerly and records lazily (see :meth:`Shadow.chunks`).

    Attributes and settings are checked here; record ids and counts are
    checked chunk by chunk as they are read. Every problem is an InputError
    naming the variable or attribute.
    """
    path = os.fspath(path)
    ds = open_dataset_checked(path, kinds)
    try:
        ens, st = _ensemble_and_settings(ds, path)
        attrs = ds.attrs
        shadow = Shadow(
            ensemble=ens, settings=st, qubit_site=check.qubit_site(ds, path, ens.n_qubits),
            model_spec=check.text_attr(attrs, "model_spec", path, default=""),
            label=check.check_label(check.json_attr(attrs, "label", path, finite=True), path),
            metadata=check.json_attr(attrs, "metadata", path, finite=False), seed=check.seed_attr(attrs, path),
            source=check.text_attr(attrs, "source", path, default=""), origin=path)
        if attrs["file_kind"] == SHADOW_KIND:
            check.record_layout(ds, path, ens.n_qubits)
            shadow = shadow.with_records(ds["record_setting"].variable, ds["outcome"].variable,
                                         ds["count"].variable, packed=True)
        return shadow
    except InputError:
        ds.close()
        raise
    except (KeyError, ValueError, TypeError, OSError) as exc:
        ds.close()
        raise InputError(f"{path}: damaged manybody file ({type(exc).__name__}: "
                         f"{str(exc).splitlines()[0] if str(exc) else 'no detail'})") from None
