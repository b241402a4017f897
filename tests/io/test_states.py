"""Target-state files (manybody.io.states): exact round trips, refusal of damaged files."""

import os

import numpy as np
import pytest
import quimb.tensor as qtn
import xarray as xr

from manybody.errors import InputError
from manybody.io.states import read_state, write_state


def _tensors(mps):
    return [np.asarray(mps[q].data) for q in range(mps.L)]


def test_dense_round_trip_is_exact(tmp_path):
    rng = np.random.default_rng(0)
    psi = rng.normal(size=32) + 1j * rng.normal(size=32)
    write_state(psi, tmp_path / "psi.nc")
    back = read_state(tmp_path / "psi.nc")
    assert back.dtype == np.complex128 and np.array_equal(back, psi)
    real = rng.normal(size=8)
    write_state(real, tmp_path / "real.nc")
    back = read_state(tmp_path / "real.nc")
    assert back.dtype == np.float64 and np.array_equal(back, real)


@pytest.mark.parametrize("dtype", [complex, float])
def test_mps_round_trip_is_exact(tmp_path, dtype):
    # uneven bond dimensions after a truncation (quimb compress), so the padding is exercised
    mps = qtn.MPS_rand_state(7, 6, dtype=dtype, seed=1)
    mps.compress(max_bond=4)
    write_state(mps, tmp_path / "mps.nc")
    back = read_state(tmp_path / "mps.nc")
    assert isinstance(back, qtn.MatrixProductState) and back.L == 7
    for a, b in zip(_tensors(mps), _tensors(back)):
        assert a.shape == b.shape and a.dtype == b.dtype and np.array_equal(a, b)
    assert np.array_equal(mps.to_dense(), back.to_dense())


def test_attributes_follow_the_format(tmp_path):
    rng = np.random.default_rng(2)
    arrays = [rng.normal(size=s) for s in [(2, 2), (2, 3, 2), (3, 2, 2), (2, 2)]]
    write_state(qtn.MatrixProductState(arrays, shape="lrp"), tmp_path / "m.nc")
    with xr.open_dataset(tmp_path / "m.nc", engine="h5netcdf") as ds:
        assert ds.attrs["file_kind"] == "manybody state" and ds.attrs["schema_version"] == 1
        assert ds.attrs["kind"] == "mps" and ds.attrs["n_qubits"] == 4
        assert ds["tensor_shape"].values.tolist() == [[1, 2, 2], [2, 3, 2], [3, 2, 2], [2, 1, 2]]


def test_failed_write_leaves_the_old_file(tmp_path):
    path = tmp_path / "psi.nc"
    write_state(np.array([1.0, 0.0]), path)
    with pytest.raises(InputError):
        write_state(np.ones(3), path)
    assert np.array_equal(read_state(path), [1.0, 0.0])
    assert os.listdir(tmp_path) == ["psi.nc"]


def _damage(path, edit):
    ds = xr.load_dataset(path, engine="h5netcdf")
    ds = edit(ds)
    ds.to_netcdf(path, engine="h5netcdf")


def _set_attr(name, value):
    def edit(ds):
        ds.attrs[name] = value
        return ds
    return edit


def _set_entry(name, index, value):
    def edit(ds):
        ds[name].values[index] = value
        return ds
    return edit


@pytest.mark.parametrize("edit,words", [
    (_set_attr("file_kind", "something else"), "file_kind"),
    (_set_attr("schema_version", 7), "schema_version"),
    (_set_attr("kind", "peps"), "kind"),
    (_set_attr("n_qubits", 3), "amplitude_real"),
    (_set_entry("amplitude_imag", 0, np.nan), "amplitude_imag"),
    (lambda ds: ds.drop_vars("amplitude_real"), "amplitude_real"),
    (lambda ds: ds.rename_dims(basis_state="amplitude"), "amplitude_real"),
])
def test_damaged_dense_file_is_refused_with_one_sentence(tmp_path, edit, words):
    path = tmp_path / "psi.nc"
    write_state(np.arange(1, 5, dtype=complex), path)
    _damage(path, edit)
    with pytest.raises(InputError) as info:
        read_state(path)
    message = str(info.value)
    assert str(path) in message and words in message and "\n" not in message


@pytest.mark.parametrize("edit,words", [
    (_set_entry("tensor_shape", (1, 0), 2), "tensor_shape"),
    (_set_entry("tensor_shape", (0, 0), 2), "tensor_shape"),
    (_set_entry("tensor_shape", (2, 1), 9), "tensor_shape"),
    (lambda ds: ds.drop_vars("tensor_imag"), "tensor_imag"),
])
def test_damaged_mps_file_is_refused_with_one_sentence(tmp_path, edit, words):
    path = tmp_path / "mps.nc"
    write_state(qtn.MPS_rand_state(4, 3, dtype=complex, seed=3), path)
    _damage(path, edit)
    with pytest.raises(InputError) as info:
        read_state(path)
    message = str(info.value)
    assert str(path) in message and words in message and "\n" not in message


def test_truncated_and_missing_files_are_refused(tmp_path):
    path = tmp_path / "psi.nc"
    write_state(np.ones(16), path)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 3])
    with pytest.raises(InputError, match="not a readable netCDF-4 file"):
        read_state(path)
    with pytest.raises(InputError, match="no such file"):
        read_state(tmp_path / "absent.nc")
