"""Target-state files (docs/formats.md): a dense vector or an MPS in netCDF-4 (xarray + h5netcdf).

Layout (dimensions in brackets):

    dense:  amplitude_real, amplitude_imag [basis_state]       float64, 2^n amplitudes,
                                                               qubit 0 = most significant bit
    mps:    tensor_real, tensor_imag [site, left_bond, right_bond, physical]
                                                               float64, site tensors (left, right,
                                                               physical) zero-padded to the largest
                                                               bond dimension
            tensor_shape [site, tensor_axis]                   int64, the true (left, right, physical)
                                                               shape of every site tensor; the first
                                                               left and the last right bond are 1

Attributes: ``file_kind`` = "manybody state", ``schema_version`` = 1,
``n_qubits``, ``kind`` ("dense" or "mps"), ``value_type`` ("real" or
"complex": the dtype given back). The tensors are stored as they are (no
normalisation, no canonical form), so a file round-trips exactly. Writes
are atomic; nothing is pickled.
"""

from __future__ import annotations

import os

import numpy as np
import xarray as xr

from manybody.errors import InputError
from manybody.io.files import atomic_path

STATE_KIND = "manybody state"
SCHEMA_VERSION = 1


def _mps_tensors(mps) -> list[np.ndarray]:
    """The raw (left, right, physical) site tensors of a quimb MPS, boundary bonds of size 1 added."""
    n = mps.L
    out = []
    for q in range(n):
        inds = ([mps.bond(q - 1, q)] if q > 0 else []) + ([mps.bond(q, q + 1)] if q < n - 1 else [])
        a = np.asarray(mps[q].transpose(*inds, mps.site_ind(q)).data)
        out.append(a.reshape((1 if q == 0 else a.shape[0], 1 if q == n - 1 else a.shape[-2], a.shape[-1])))
    return out


def _state_dataset(state) -> xr.Dataset:
    if hasattr(state, "site_ind") and hasattr(state, "L"):
        tensors = _mps_tensors(state)
        shapes = np.array([t.shape for t in tensors], dtype=np.int64)
        chi = int(shapes[:, :2].max())
        d = int(shapes[:, 2].max())
        padded = np.zeros((len(tensors), chi, chi, d), dtype=complex)
        for q, t in enumerate(tensors):
            padded[q, :t.shape[0], :t.shape[1], :t.shape[2]] = t
        dims = ("site", "left_bond", "right_bond", "physical")
        data = {"tensor_real": (dims, padded.real.copy()), "tensor_imag": (dims, padded.imag.copy()),
                "tensor_shape": (("site", "tensor_axis"), shapes)}
        kind, n, is_complex = "mps", len(tensors), any(np.iscomplexobj(t) for t in tensors)
    else:
        psi = np.asarray(state).ravel()
        n = int(round(np.log2(max(len(psi), 1))))
        if len(psi) != 2**n or n < 1 or not np.issubdtype(psi.dtype, np.number):
            raise InputError(f"a dense state needs 2^n numeric amplitudes; got {len(psi)} of type {psi.dtype}")
        data = {"amplitude_real": (("basis_state",), psi.real.astype(float)),
                "amplitude_imag": (("basis_state",), psi.imag.astype(float) if np.iscomplexobj(psi)
                                   else np.zeros(len(psi)))}
        kind, is_complex = "dense", np.iscomplexobj(psi)
    attrs = {"file_kind": STATE_KIND, "schema_version": SCHEMA_VERSION, "n_qubits": n, "kind": kind,
             "value_type": "complex" if is_complex else "real"}
    return xr.Dataset(data, attrs=attrs)


def write_state(state, path) -> None:
    """Write a dense state vector (numpy) or a quimb MPS to ``path`` atomically."""
    ds = _state_dataset(state)
    with atomic_path(path, ".nc") as tmp:
        ds.to_netcdf(tmp, engine="h5netcdf")


def _open(path) -> xr.Dataset:
    if not os.path.exists(path):
        raise InputError(f"{path}: no such file")
    try:
        ds = xr.load_dataset(path, engine="h5netcdf")
    except Exception as exc:  # h5py and xarray raise many kinds for broken files
        raise InputError(f"{path}: not a readable netCDF-4 file ({type(exc).__name__})") from None
    if ds.attrs.get("file_kind") != STATE_KIND:
        raise InputError(f"{path}: not a manybody state file (attribute file_kind is missing or foreign)")
    version = ds.attrs.get("schema_version")
    if not isinstance(version, (int, np.integer)) or not 1 <= int(version) <= SCHEMA_VERSION:
        shown = int(version) if isinstance(version, (int, np.integer)) else repr(version)
        raise InputError(f"{path}: attribute schema_version is {shown}; this version of manybody reads "
                         f"state files of schema version 1 to {SCHEMA_VERSION}")
    return ds


def _need(ds, name, path, dims) -> np.ndarray:
    if name not in ds.variables:
        raise InputError(f"{path}: variable {name!r} is missing")
    var = ds[name]
    if var.dims != dims:
        raise InputError(f"{path}: variable {name!r} has dimensions {var.dims}, expected {dims}")
    values = np.asarray(var.values)
    if not np.issubdtype(values.dtype, np.number) or not np.all(np.isfinite(values)):
        raise InputError(f"{path}: variable {name!r} must hold finite numbers")
    return values


def read_state(path):
    """A numpy state vector or a quimb MPS from a state file; bad files raise InputError (one sentence)."""
    path = os.fspath(path)
    ds = _open(path)
    kind, n = ds.attrs.get("kind"), ds.attrs.get("n_qubits")
    if not isinstance(n, (int, np.integer)) or n < 1:
        raise InputError(f"{path}: attribute n_qubits must be a positive integer")
    real = ds.attrs.get("value_type") == "real"
    if kind == "dense":
        re = _need(ds, "amplitude_real", path, ("basis_state",))
        im = _need(ds, "amplitude_imag", path, ("basis_state",))
        if len(re) != 2**int(n):
            raise InputError(f"{path}: variable 'amplitude_real' has {len(re)} entries; n_qubits = {n} needs {2**n}")
        return re.copy() if real else re + 1j * im
    if kind == "mps":
        return _read_mps(ds, path, int(n), real)
    raise InputError(f"{path}: attribute kind is {kind!r}; allowed: dense, mps")


def _read_mps(ds, path, n: int, real: bool):
    import quimb.tensor as qtn

    dims = ("site", "left_bond", "right_bond", "physical")
    re = _need(ds, "tensor_real", path, dims)
    im = _need(ds, "tensor_imag", path, dims)
    shapes = _need(ds, "tensor_shape", path, ("site", "tensor_axis"))
    if re.shape[0] != n or shapes.shape != (n, 3):
        raise InputError(f"{path}: variable 'tensor_shape' must be ({n}, 3) for n_qubits = {n}")
    ok = (np.all(shapes >= 1) and np.all(shapes <= np.array(re.shape[1:])) and shapes[0, 0] == 1
          and shapes[-1, 1] == 1 and np.array_equal(shapes[1:, 0], shapes[:-1, 1]))
    if not ok or n < 2:
        raise InputError(f"{path}: variable 'tensor_shape' does not describe a chain of matching bonds "
                         f"(first left and last right bond 1, at least 2 sites)")
    values = re if real else re + 1j * im
    arrays = [values[q, :l, :r, :p].copy() for q, (l, r, p) in enumerate(shapes.tolist())]
    arrays[0], arrays[-1] = arrays[0][0], arrays[-1][:, 0]
    return qtn.MatrixProductState(arrays, shape="lrp")
