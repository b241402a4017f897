"""Shadow and settings files: round trips, lazy reading, atomic writes, bad files."""

import os

import h5py
import numpy as np
import pytest
import xarray as xr

from manybody.errors import InputError
from manybody.io.shadow import SCHEMA_VERSION, Shadow, ShadowWriter, read_shadow, write_shadow
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from tests.helpers import chain

ENSEMBLES = [LocalEnsemble(5), ShallowEnsemble(5, 3, chain(5)), GlobalEnsemble(3)]


def make_shadow(ens, records=40):
    rng = np.random.default_rng(4)
    settings = ens.draw(6, rng)
    return Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(ens.n_qubits),
                  record_setting=rng.integers(0, 6, records), counts=rng.integers(1, 5, records),
                  outcomes=rng.integers(0, 2, (records, ens.n_qubits), dtype=np.uint8),
                  model_spec="[lattice]\n", label={"time": 1.5}, metadata={"readout_error": 0.01},
                  seed=99, source="test")


@pytest.mark.parametrize("ens", ENSEMBLES, ids=lambda e: e.kind)
def test_round_trip(tmp_path, ens):
    shadow = make_shadow(ens)
    path = tmp_path / "s.nc"
    write_shadow(shadow, path)
    back = read_shadow(path)
    assert back.ensemble.kind == ens.kind and back.ensemble.depth == ens.depth
    for name in ("ids", "basis", "gates", "tableau_x", "tableau_z", "tableau_sign"):
        a, b = getattr(shadow.settings, name), getattr(back.settings, name)
        assert (a is None and b is None) or np.array_equal(a, b)
    chunks = list(back.chunks(size=7))
    assert len(chunks) == 6
    assert np.array_equal(np.concatenate([c[1] for c in chunks]), shadow.outcomes)
    assert np.array_equal(np.concatenate([c[0] for c in chunks]), shadow.record_setting)  # ids 0..5
    assert np.array_equal(np.concatenate([c[2] for c in chunks]), shadow.counts)
    assert back.label == {"time": 1.5} and back.metadata == {"readout_error": 0.01} and back.seed == 99
    # any xarray user can open it
    ds = xr.open_dataset(path, engine="h5netcdf")
    assert ds.attrs["file_kind"] == "manybody shadow" and ds.sizes["record"] == 40


def test_compressed_and_chunked(tmp_path):
    path = tmp_path / "s.nc"
    write_shadow(make_shadow(LocalEnsemble(5), records=5000), path)
    with h5py.File(path) as f:
        assert f["outcome"].compression == "gzip" and f["outcome"].chunks is not None


def test_atomic_write_keeps_old_file(tmp_path):
    path = tmp_path / "s.nc"
    write_shadow(make_shadow(LocalEnsemble(5)), path)
    before = path.read_bytes()
    shadow = make_shadow(LocalEnsemble(5))
    with pytest.raises(RuntimeError, match="interrupted"):
        with ShadowWriter(path) as out:
            for ids, outcomes, counts in shadow.records(size=8):
                out.append(ids, outcomes, counts)
            raise RuntimeError("interrupted")
    assert path.read_bytes() == before
    assert os.listdir(tmp_path) == ["s.nc"]


def test_bad_files(tmp_path):
    good = tmp_path / "good.nc"
    write_shadow(make_shadow(LocalEnsemble(5)), good)
    truncated = tmp_path / "truncated.nc"
    truncated.write_bytes(good.read_bytes()[:300])
    with pytest.raises(InputError, match="not a readable netCDF-4 file"):
        read_shadow(truncated)
    foreign = tmp_path / "foreign.nc"
    xr.Dataset({"t": (("x",), np.arange(3))}).to_netcdf(foreign, engine="h5netcdf")
    with pytest.raises(InputError, match="not a manybody file"):
        read_shadow(foreign)
    future = tmp_path / "future.nc"
    write_shadow(make_shadow(LocalEnsemble(5)), future)
    with h5py.File(future, "a") as f:
        f.attrs["schema_version"] = SCHEMA_VERSION + 1
    with pytest.raises(InputError, match="newer manybody"):
        read_shadow(future)
    with pytest.raises(InputError, match="no such file"):
        read_shadow(tmp_path / "absent.nc")


def test_atomic_path_leaves_nothing_on_failure(tmp_path):
    from manybody.io.files import atomic_path

    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(ValueError):
        with atomic_path(target) as tmp:
            open(tmp, "w").write("half")
            raise ValueError("interrupted")
    assert target.read_text() == "old" and os.listdir(tmp_path) == ["out.txt"]
    with atomic_path(target) as tmp:
        open(tmp, "w").write("new")
    assert target.read_text() == "new" and os.listdir(tmp_path) == ["out.txt"]


def test_a_range_of_records_and_the_counts_without_outcomes(tmp_path):
    # Parts of the records read on their own: the same records as the whole file, sliced; a bad record
    # is reported by its number in the file, not in the part.
    path = tmp_path / "s.nc"
    shadow = make_shadow(LocalEnsemble(5), records=100)
    write_shadow(shadow, path)
    back = read_shadow(path)
    part = list(back.chunks(size=16, start=30, stop=75))
    assert [len(c[0]) for c in part] == [16, 16, 13]
    assert np.array_equal(np.concatenate([c[1] for c in part]), shadow.outcomes[30:75])
    assert np.array_equal(np.concatenate([c[2] for c in part]), shadow.counts[30:75])
    light = list(back.chunks(size=64, outcomes=False))
    assert all(c[1] is None for c in light)
    assert np.array_equal(np.concatenate([c[0] for c in light]), shadow.record_setting)
    bad = tmp_path / "bad.nc"
    write_shadow(shadow, bad)
    with h5py.File(bad, "a") as f:
        f["record_setting"][52] = 77  # no such setting
    with pytest.raises(InputError, match="setting 77 at record 52"):
        list(read_shadow(bad).chunks(size=16, start=40, stop=60))
