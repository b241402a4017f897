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
    record_setting [record]              int64, position of the record's setting
    outcome [record, qubit]              uint8 bits, 0 = +1 eigenvalue
    count [record]                       uint32 shots with this outcome

Attributes: ``file_kind`` ("manybody settings" or "manybody shadow"),
``schema_version``, ``ensemble``, ``depth``, ``n_qubits``, ``model_spec``
(TOML text), ``label`` (JSON object, e.g. {"time": 0.5}), ``metadata``
(JSON object: noise, truncation, ...), ``seed``, ``source``, ``created``,
``tool_version``. Writes are atomic (temporary file, then rename).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
import datetime as _dt
import json
import os
import tempfile

import numpy as np
import xarray as xr

from . import __version__
from .ensembles import GlobalEnsemble, LocalEnsemble, Settings, ShallowEnsemble
from .errors import InputError

SCHEMA_VERSION = 1
SETTINGS_KIND = "manybody settings"
SHADOW_KIND = "manybody shadow"
_COMPRESSION = {"zlib": True, "complevel": 4}


@dataclass(frozen=True, eq=False)
class Shadow:
    """Settings plus records of one randomized-measurement experiment.

    ``record_setting``, ``outcomes`` and ``counts`` may be numpy arrays or lazy
    xarray variables; :meth:`chunks` reads them piece by piece.
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

    @property
    def n_qubits(self) -> int:
        return self.ensemble.n_qubits

    @property
    def n_records(self) -> int:
        return 0 if self.counts is None else int(self.counts.shape[0])

    @property
    def n_snapshots(self) -> int:
        return 0 if self.counts is None else int(np.asarray(self.counts).sum(dtype=np.int64))

    def chunks(self, size: int = 1 << 16):
        """Yield (record_setting, outcomes, counts) as numpy arrays, ``size`` records at a time."""
        for start in range(0, self.n_records, size):
            sl = slice(start, start + size)
            yield (np.asarray(self.record_setting[sl], dtype=np.int64),
                   np.asarray(self.outcomes[sl], dtype=np.uint8),
                   np.asarray(self.counts[sl], dtype=np.int64))

    def with_records(self, record_setting, outcomes, counts, **changes) -> "Shadow":
        return replace(self, record_setting=record_setting, outcomes=outcomes, counts=counts, **changes)


# ----------------------------------------------------------------- writing
def to_dataset(shadow: Shadow, created: str | None = None) -> xr.Dataset:
    """The shadow (or its settings alone, when it has no records) as an xarray Dataset."""
    ens, st = shadow.ensemble, shadow.settings
    data = {"setting_id": (("setting",), np.asarray(st.ids, dtype=np.int64)),
            "qubit_site": (("qubit",), np.asarray(shadow.qubit_site, dtype=np.int64))}
    if st.basis is not None:
        data["basis"] = (("setting", "qubit"), np.asarray(st.basis, dtype=np.uint8),
                         {"flag_values": np.array([0, 1, 2], dtype=np.uint8), "flag_meanings": "X Y Z"})
    if ens.kind == "shallow":
        data["gate"] = (("setting", "slot"), np.asarray(st.gates, dtype=np.uint16),
                        {"meaning": "canonical two-qubit Clifford index (manybody.clifford)"})
        data["gate_qubits"] = (("slot", "pair"), ens.gate_qubits)
        data["gate_layer"] = (("slot",), ens.gate_layer)
        data["coupling"] = (("edge", "pair"), ens.coupling)
    if ens.kind == "global":
        data["tableau_x"] = (("setting", "generator", "qubit"), st.tableau_x)
        data["tableau_z"] = (("setting", "generator", "qubit"), st.tableau_z)
        data["tableau_sign"] = (("setting", "generator"), st.tableau_sign)
    kind = SETTINGS_KIND
    if shadow.counts is not None:
        kind = SHADOW_KIND
        data["record_setting"] = (("record",), np.asarray(shadow.record_setting, dtype=np.int64))
        data["outcome"] = (("record", "qubit"), np.asarray(shadow.outcomes, dtype=np.uint8),
                           {"meaning": "0 = +1 eigenvalue of the measured Pauli"})
        data["count"] = (("record",), np.asarray(shadow.counts, dtype=np.uint32))
    attrs = {
        "file_kind": kind, "schema_version": SCHEMA_VERSION, "ensemble": ens.kind,
        "depth": int(ens.depth), "n_qubits": int(ens.n_qubits), "model_spec": shadow.model_spec,
        "label": json.dumps(shadow.label), "metadata": json.dumps(shadow.metadata),
        "seed": "" if shadow.seed is None else str(shadow.seed), "source": shadow.source,
        "created": created or _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "tool_version": __version__,
    }
    return xr.Dataset(data, attrs=attrs)


def write_atomic(ds: xr.Dataset, path, chunk_records: int = 1 << 16) -> None:
    """Write a dataset to netCDF-4 (h5netcdf), compressed, through a temporary file and a rename."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    os.makedirs(folder, exist_ok=True)
    encoding = {}
    for name, var in ds.variables.items():
        if var.dtype.kind in "iuf" and var.ndim:
            enc = dict(_COMPRESSION)
            if "record" in var.dims and ds.sizes["record"] > 0:
                enc["chunksizes"] = tuple(min(chunk_records, ds.sizes[d]) if d == "record" else ds.sizes[d]
                                          for d in var.dims)
            encoding[name] = enc
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".nc", dir=folder)
    os.close(fd)
    try:
        ds.to_netcdf(tmp, engine="h5netcdf", encoding=encoding)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise


def write_shadow(shadow: Shadow, path) -> None:
    write_atomic(to_dataset(shadow), path)


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
                                         _need(ds, "outcome", path).variable, _need(ds, "count", path).variable)
        return shadow
    except InputError:
        raise
    except (KeyError, ValueError) as exc:
        raise InputError(f"{path}: damaged manybody file ({exc})") from None
