"""Damaged shadow files and CSV corner cases: one sentence naming the variable, attribute, line or field.

Facts of the trade used: uint32 holds 0 .. 2^32 - 1, so 2^32 + 5 stored as
uint32 wraps to 5 (two's-complement arithmetic modulo 2^32); the UTF-8
byte-order mark is the bytes EF BB BF (Unicode Standard, section 23.8);
the two-qubit Clifford group modulo phases has 11520 elements (from
memory; manybody.measure.clifford also counts its table).
"""

import json

import numpy as np
import pytest
import xarray as xr

from manybody.errors import InputError
from manybody.io.ingest import ingest, parse_labels
from manybody.io.shadow import Shadow, read_shadow, write_shadow
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble
from tests.helpers import chain


def make(ens, records=30, ids=None):
    rng = np.random.default_rng(2)
    st = ens.draw(4, rng)
    if ids is not None:
        st.ids[:] = ids
    return Shadow(ensemble=ens, settings=st, qubit_site=np.arange(ens.n_qubits),
                  record_setting=st.ids[rng.integers(0, 4, records)], counts=rng.integers(1, 4, records),
                  outcomes=rng.integers(0, 2, (records, ens.n_qubits), dtype=np.uint8), label={"time": 0.5})


def damaged(tmp_path, shadow, change, name="bad.nc"):
    """Write ``shadow``, apply ``change`` to it as an xarray Dataset, write it back with xarray."""
    good = tmp_path / "good.nc"
    write_shadow(shadow, good)
    ds = xr.load_dataset(good, engine="h5netcdf")
    ds = change(ds) or ds
    path = tmp_path / name
    ds.to_netcdf(path, engine="h5netcdf")
    return path


def read_all(path):
    shadow = read_shadow(path)
    for _ in shadow.chunks(size=7):
        pass
    return shadow


def one_sentence(path, needle, reader=read_all):
    with pytest.raises(InputError) as info:
        reader(path)
    message = str(info.value)
    assert message.startswith(str(path)) and "\n" not in message and needle in message, message
    return message


# ----------------------------------------------------------------- counts beyond uint32
def test_count_beyond_uint32_round_trips(tmp_path):
    big = 2**32 + 5
    csv = tmp_path / "records.csv"
    csv.write_text(f"setting,basis,outcome,count\n1,XY,01,{big}\n2,ZZ,11,3\n")
    ingest(csv, tmp_path / "s.nc")
    back = read_shadow(tmp_path / "s.nc")
    assert np.concatenate([c for _, _, c in back.chunks()]).tolist() == [big, 3]
    assert back.n_snapshots == big + 3
    assert np.uint32(big % 2**32) == 5  # what uint32 storage would have kept
    # written from memory, and the largest count a CSV can hold (15 digits)
    shadow = make(LocalEnsemble(3))
    counts = np.array(shadow.counts)
    counts[:2] = [big, 10**15 - 1]
    write_shadow(shadow.with_records(shadow.record_setting, shadow.outcomes, counts), tmp_path / "m.nc")
    assert np.array_equal(np.concatenate([c for _, _, c in read_shadow(tmp_path / "m.nc").records()]), counts)


def test_old_files_with_uint32_counts_stay_readable(tmp_path):
    shadow = make(LocalEnsemble(3))
    path = damaged(tmp_path, shadow, lambda ds: ds.assign(count=ds["count"].astype(np.uint32)), "old.nc")
    assert xr.open_dataset(path, engine="h5netcdf")["count"].dtype == np.uint32
    back = read_all(path)
    assert np.array_equal(np.concatenate([c for _, _, c in back.records()]), shadow.counts)


# ----------------------------------------------------------------- damaged variables
def set_value(name, index, value):
    def change(ds):
        values = ds[name].values.copy()
        values[index] = value
        return ds.assign({name: (ds[name].dims, values, ds[name].attrs)})
    return change


@pytest.mark.parametrize("ids", [None, [10, 20, 30, 40]], ids=["ids 0..3", "ids 10..40"])
def test_record_naming_an_absent_setting(tmp_path, ids):
    path = damaged(tmp_path, make(LocalEnsemble(3), ids=ids), set_value("record_setting", 9, 99))
    read_shadow(path)  # the records are checked as they are read
    one_sentence(path, "variable record_setting names setting 99 at record 9, which is not in variable setting_id")
    # a few records picked from the file (the fidelity's pilot) are checked too, and the message names the record
    one_sentence(path, "names setting 99 at record 9, which", lambda p: read_shadow(p).pick([0, 9, 20]))


def test_picked_records_are_the_records_read_in_chunks(tmp_path):
    # our own reader against itself: packed outcomes of a shallow shadow, on disk and in memory
    shadow = make(ShallowEnsemble(10, 2, chain(10)), records=50, ids=[10, 20, 30, 40])
    write_shadow(shadow, tmp_path / "s.nc")
    picked = [0, 7, 8, 31, 49]
    for source in (read_shadow(tmp_path / "s.nc"), shadow):
        positions, bits = source.pick(picked)
        every = [(p, b) for p, b, _ in source.chunks(7)]
        all_positions, all_bits = np.concatenate([p for p, _ in every]), np.concatenate([b for _, b in every])
        np.testing.assert_array_equal(positions, all_positions[picked])
        np.testing.assert_array_equal(bits, all_bits[picked])
    assert source.pick([])[1].shape == (0, 10)


@pytest.mark.parametrize("ens,change,needle", [
    (LocalEnsemble(3), set_value("basis", (1, 2), 3), "variable basis has 3 at [1, 2]; allowed: 0 (X), 1 (Y), 2 (Z)"),
    (LocalEnsemble(3), set_value("setting_id", 2, 0), "variable setting_id lists setting 0 more than once"),
    (LocalEnsemble(3), set_value("setting_id", 1, -4), "variable setting_id has -4 at [1]"),
    (ShallowEnsemble(4, 2, chain(4)), set_value("gate", (0, 1), 11520), "variable gate has 11520 at [0, 1]; "
                                                                          "allowed: 0 to 11519"),
    (ShallowEnsemble(4, 2, chain(4)), set_value("coupling", (0, 1), 7), "variable coupling has 7 at [0, 1]"),
    (GlobalEnsemble(2), set_value("tableau_x", (0, 1, 1), 2), "variable tableau_x has 2 at [0, 1, 1]; "
                                                               "allowed: bits 0 and 1"),
    (GlobalEnsemble(2), set_value("tableau_sign", (3, 0), 0), "variable tableau_sign has 0 at [3, 0]"),
    (LocalEnsemble(3), lambda ds: ds.assign(qubit_site=("site_of", np.arange(4))),
     "variable qubit_site has 4 entries but attribute n_qubits is 3"),
    (LocalEnsemble(3), set_value("count", 4, -2), None),  # uint64: cannot hold -2; see the signed case below
    (LocalEnsemble(3), lambda ds: ds.assign(count=ds["count"].astype(np.int64) - 5),
     "variable count has -"),
    (LocalEnsemble(3), lambda ds: ds.assign(count=ds["count"].astype(float)), "variable count holds float64"),
    (LocalEnsemble(3), lambda ds: ds.drop_vars("outcome"), "variable outcome is missing"),
], ids=lambda v: getattr(v, "kind", None) if not callable(v) or hasattr(v, "kind") else None)
def test_damaged_variables(tmp_path, ens, change, needle):
    if needle is None:
        with pytest.raises(OverflowError):  # numpy refuses to put -2 in uint64: nothing to test on disk
            damaged(tmp_path, make(ens), change)
        return
    one_sentence(damaged(tmp_path, make(ens), change), needle)


def set_attr(name, value):
    def change(ds):
        ds.attrs[name] = value
    return change


DEEP = "[" * 100000 + "]" * 100000


@pytest.mark.parametrize("name,value,needle", [
    ("schema_version", "abc", "attribute schema_version is 'abc'; allowed: an integer from 1 to 1"),
    ("schema_version", 0.5, "attribute schema_version is 0.5"),
    ("file_kind", np.array([1, 2]), "attribute file_kind is missing or foreign"),
    ("n_qubits", "abc", "attribute n_qubits is 'abc'"),
    ("n_qubits", 4, "variable basis has shape (4, 3); expected (4, 4)"),
    ("n_qubits", 0, "attribute n_qubits is 0; allowed: an integer from 1"),
    ("ensemble", "weird", "attribute ensemble is 'weird'; allowed: local, shallow, global"),
    ("label", "[1, 2]", "attribute label is a JSON list; allowed: a JSON object"),
    ("label", '{"time": ', "attribute label is not valid JSON"),
    ("label", DEEP, "attribute label is nested too deeply"),
    ("label", json.dumps({"a": {"b": {"c": "[" * 14 + "1" + "]" * 14}}}).replace('"[', "[").replace(']"', "]"),
     "attribute label is nested 18 deep"),
    ("label", np.array([1.0, 2.0]), "attribute label must be text, found an array of 2 values"),
    ("label", '{"time": 1e400}', "attribute label holds an infinite number"),
    ("label", '{"time": NaN}', "attribute label is not valid JSON (NaN is not a number JSON allows)"),
    ("label", '{"time": "soon"}', "label time is 'soon'; allowed: a finite number"),
    ("metadata", DEEP, "attribute metadata is nested too deeply"),
    ("seed", "xyz", "attribute seed is 'xyz'; allowed: empty or a non-negative integer"),
    ("model_spec", 7, "attribute model_spec must be text, found 7"),
], ids=lambda v: v if isinstance(v, str) and len(v) < 20 and v.isidentifier() else "")
def test_damaged_attributes(tmp_path, name, value, needle):
    one_sentence(damaged(tmp_path, make(LocalEnsemble(3)), set_attr(name, value)), needle)


def test_attributes_that_are_fine(tmp_path):
    path = damaged(tmp_path, make(LocalEnsemble(3)), set_attr("metadata", json.dumps({"x": float("inf")})))
    assert read_all(path).metadata == {"x": float("inf")}  # metadata may record an infinite value
    path = damaged(tmp_path, make(LocalEnsemble(3)), lambda ds: ds.drop_attrs().assign_attrs(
        {k: v for k, v in ds.attrs.items() if k != "label"}), "nolabel.nc")
    assert read_all(path).label == {}


# ----------------------------------------------------------------- CSV corner cases
def ingest_text(tmp_path, data: bytes):
    path = tmp_path / "records.csv"
    path.write_bytes(data)
    ingest(path, tmp_path / "out.nc")
    return read_shadow(tmp_path / "out.nc")


@pytest.mark.parametrize("text,needle", [
    ("setting,basis,outcome\n,XX,00\n", "line 2: field 1 (setting) is empty; expected a non-negative integer"),
    ("setting,basis,outcome\n1,XX,00\n\n,XY,01\n", "line 4: field 1 (setting) is empty"),
    ("basis,outcome,setting\nXX,00,\n", "line 2: field 3 (setting) is empty"),
    ("setting,basis,outcome,count\n1,XX,00,\n", "line 2: field 4 (count) is empty"),
    ("setting,basis,outcome\n1,,00\n", "line 2: field 2 (basis) is empty"),
    ("setting,basis,outcome\n1234567890123456,XX,00\n",
     "line 2: setting 1234567890123456 has more than 15 digits; allowed: 0 to 999999999999999"),
    ("setting,basis,outcome,count\n1,XX,00,1000000000000000\n", "line 2: count 1000000000000000 has more than 15"),
    ("setting,basis,outcome\n" + "1" * 80 + ",XX,00\n", "has 80 digits; allowed: 0 to 999999999999999"),
])
def test_csv_fields_reported_where_they_are(tmp_path, text, needle):
    one_sentence(tmp_path / "records.csv", needle, reader=lambda p: ingest_text(tmp_path, text.encode()))


def test_csv_byte_order_mark_and_zero_padding(tmp_path):
    shadow = ingest_text(tmp_path, b"\xef\xbb\xbfsetting,basis,outcome\r\n00000000000000000007,XY,01\r\n")
    assert shadow.settings.ids.tolist() == [7]
    one_sentence(tmp_path / "records.csv", "the file is UTF-16 text; save it as UTF-8",
                 reader=lambda p: ingest_text(tmp_path, "setting,basis,outcome\n1,X,0\n".encode("utf-16")))


def test_label_time_must_be_a_finite_number():
    for item in ("time=abc", "time=nan", "time=inf"):
        with pytest.raises(InputError, match="time must be a finite number"):
            parse_labels([item])
    assert parse_labels(["run=nan"]) == {"run": "nan"}  # other keys keep non-numbers as text


# ----------------------------------------------------------------- damaged bytes
def test_damaged_bytes_in_the_records(tmp_path):
    ens = LocalEnsemble(8)
    rng = np.random.default_rng(3)
    records = 100000
    shadow = Shadow(ensemble=ens, settings=ens.draw(20, rng), qubit_site=np.arange(8),
                    record_setting=rng.integers(0, 20, records), counts=rng.integers(1, 5, records),
                    outcomes=rng.integers(0, 2, (records, 8), dtype=np.uint8))
    good = tmp_path / "good.nc"
    write_shadow(shadow, good)
    data = good.read_bytes()
    messages = []
    for k in range(12):  # 12 places spread over the file, 32 random bytes each
        damaged_bytes = bytearray(data)
        at = (k + 1) * len(data) // 14
        damaged_bytes[at:at + 32] = rng.integers(0, 256, 32, dtype=np.uint8).tobytes()
        path = tmp_path / f"bad{k}.nc"
        path.write_bytes(bytes(damaged_bytes))
        try:
            for _ in read_shadow(path).chunks():  # whole HDF5 chunks: small slices would inflate each many times
                pass
        except InputError as exc:
            assert "\n" not in str(exc) and str(exc).startswith(str(path))
            messages.append(str(exc))
    # deflate streams carry an Adler-32 checksum (RFC 1950), so damaged chunks are found when read
    assert any("cannot be read at records" in m and "the file is damaged" in m for m in messages), messages


def test_large_ids_stored_unsigned(tmp_path):
    # ids above 2^53 are not exact in float64 (IEEE 754 double: 53-bit significand), so they must be
    # compared as integers even when a file stores record_setting as uint64
    ids = [2**60 + 1, 2**60 + 2, 2**60 + 3, 5]
    shadow = make(LocalEnsemble(3), ids=ids)
    path = damaged(tmp_path, shadow, lambda ds: ds.assign(record_setting=ds["record_setting"].astype(np.uint64)))
    back = read_all(path)
    got = np.concatenate([p for p, _, _ in back.chunks()])
    assert np.array_equal(back.settings.ids[got], shadow.record_setting)
    bad = damaged(tmp_path, shadow, lambda ds: ds.assign(
        record_setting=ds["record_setting"].astype(np.uint64) + np.uint64(1)), "bad2.nc")
    one_sentence(bad, "which is not in variable setting_id")
