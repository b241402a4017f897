"""Property tests of the file layer: a correct result or one InputError line, nothing else.

CSV rows are drawn from small alphabets with damaged pieces mixed in and
compared with a straightforward row-by-row reading of the format
(docs/formats.md) written here with Python strings; shadow files are
written, then one attribute or variable is changed through xarray. For
every example: either the output is right, or an InputError of one line;
never another exception, never a changed input file, never a leftover
temporary file. Examples are derandomized (tests/conftest.py).
"""

import hashlib
import json
import os
import tempfile

import numpy as np
import pytest
import xarray as xr
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from manybody.errors import InputError
from manybody.io import records
from manybody.io.ingest import ingest
from manybody.io.shadow import Shadow, read_shadow, write_shadow
from manybody.measure.ensembles import GlobalEnsemble, LocalEnsemble, ShallowEnsemble, basis_strings
from tests.helpers import chain

FAST = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def digest(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


# ----------------------------------------------------------------- CSV
def reference_reading(data: bytes):
    """The format read the plain way: list of (setting, basis, outcome, count) rows, or None if invalid."""
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    text = data.decode("ascii")
    lines = text.split("\n")
    if text.endswith("\n"):
        lines = lines[:-1]
    if not lines or not lines[0].strip():
        return None
    names = [c.strip().lower() for c in lines[0].rstrip("\r\n").split(",")]
    if set(names) - {"setting", "basis", "outcome", "count"} or len(set(names)) != len(names) \
            or not {"setting", "basis", "outcome"} <= set(names):
        return None

    def integer(field):
        ok = field.isascii() and field.isdigit() and len(field) <= 64 and int(field) < 10**15
        return int(field) if ok else None

    rows, n, basis_of = [], None, {}
    for line in lines[1:]:
        line = line[:-1] if line.endswith("\r") else line
        if not line:
            continue
        fields = line.split(",")
        if len(fields) != len(names):
            return None
        row = dict(zip(names, fields))
        n = len(row["outcome"]) if n is None else n
        setting, count = integer(row["setting"]), integer(row.get("count", "1"))
        if n == 0 or setting is None or count is None or len(row["outcome"]) != n or len(row["basis"]) != n \
                or set(row["outcome"]) - set("01") or set(row["basis"]) - set("XYZ") \
                or basis_of.setdefault(setting, row["basis"]) != row["basis"]:
            return None
        rows.append((setting, row["basis"], row["outcome"], count))
    return rows or None


BAD = {
    "setting": ["", "-1", "x", " 3", "1234567890123456", "1" * 70],
    "count": ["", "-3", "2.5", "1000000000000000", "1e3"],
    "basis": ["", "Q", "XYZQ", "X Y", "xy"],
    "outcome": ["", "2", "0 1", "0101010", "ab"],
}
ODD_GOOD = {"setting": ["0017", "999999999999999", "0" * 40 + "5"],
            "count": ["0", str(2**32 + 5), "999999999999999", "0" * 30 + "7"]}


@st.composite
def csv_files(draw):
    """Half the files are valid (odd but legal pieces included); the others carry one damage."""
    n = draw(st.integers(1, 3))
    names = draw(st.permutations(["setting", "basis", "outcome"] + draw(st.sampled_from([[], ["count"]]))))
    basis_of = [draw(st.text("XYZ", min_size=n, max_size=n)) for _ in range(6)]
    rows = []
    for _ in range(draw(st.integers(0, 10))):
        k = draw(st.integers(0, 5))
        value = {"setting": str(k), "basis": basis_of[k], "outcome": draw(st.text("01", min_size=n, max_size=n)),
                 "count": str(draw(st.integers(0, 50)))}
        for name in ("setting", "count"):
            if draw(st.integers(0, 9)) == 0:
                value[name] = draw(st.sampled_from(ODD_GOOD[name]))
        rows.append([value[name] for name in names])
        if draw(st.integers(0, 5)) == 0:
            rows.append([])  # a blank line
    header = ",".join(names)
    damage = draw(st.sampled_from([None] * 9 + ["field"] * 5 + ["extra", "missing", "header", "disagree"]))
    data_rows = [i for i, r in enumerate(rows) if r]
    if damage == "header":
        header = draw(st.sampled_from(["setting,outcome", header + ",colour", "", header + ",setting"]))
    elif damage and data_rows:
        i = draw(st.sampled_from(data_rows))
        if damage == "field":
            j = draw(st.integers(0, len(names) - 1))
            rows[i][j] = draw(st.sampled_from(BAD[names[j]]))
        elif damage == "extra":
            rows[i].append("1")
        elif damage == "missing":
            rows[i].pop()
        else:
            j = names.index("basis")
            rows[i][j] = "".join("X" if c != "X" else "Y" for c in rows[i][j])
    header = draw(st.sampled_from([header, header, header.upper(), header.replace(",", " , ")]))
    eol = draw(st.sampled_from(["\n", "\r\n"]))
    text = eol.join([header] + [",".join(r) for r in rows]) + draw(st.sampled_from([eol, ""]))
    bom = draw(st.sampled_from([b"", b"", b"\xef\xbb\xbf"]))
    return bom + text.encode("ascii")


@FAST
@given(data=csv_files(), block=st.sampled_from([None, 16, 40]))
def test_fuzz_records_csv(data, block):
    expected = reference_reading(data)
    with tempfile.TemporaryDirectory() as folder:
        csv, out = os.path.join(folder, "records.csv"), os.path.join(folder, "out.nc")
        with open(csv, "wb") as fh:
            fh.write(data)
        before, old = digest(csv), records.BLOCK_BYTES
        records.BLOCK_BYTES = block or old
        try:
            ingest(csv, out)
        except InputError as exc:
            message = str(exc)
            assert "\n" not in message and message.startswith(csv), message
            assert expected is None, f"refused a good file: {message}"
            assert os.listdir(folder) == ["records.csv"]
        else:
            assert expected is not None, "accepted a bad file"
            shadow = read_shadow(out)
            got = list(shadow.records())
            ids = np.concatenate([g[0] for g in got]).tolist()
            bits = np.concatenate([g[1] for g in got])
            counts = np.concatenate([g[2] for g in got]).tolist()
            assert ids == [r[0] for r in expected] and counts == [r[3] for r in expected]
            assert ["".join(map(str, b)) for b in bits] == [r[2] for r in expected]
            bases = dict(zip(shadow.settings.ids.tolist(), basis_strings(shadow.settings.basis)))
            assert bases == {r[0]: r[1] for r in expected}
            assert sorted(os.listdir(folder)) == ["out.nc", "records.csv"]
        finally:
            records.BLOCK_BYTES = old
        assert digest(csv) == before


# ----------------------------------------------------------------- shadow files
@pytest.fixture(scope="module")
def good_files(tmp_path_factory):
    """One valid shadow file per ensemble, written once for the module (pytest removes the folder)."""
    folder = tmp_path_factory.mktemp("good")
    paths = {}
    for kind, ens in (("local", LocalEnsemble(3)), ("shallow", ShallowEnsemble(4, 2, chain(4))),
                      ("global", GlobalEnsemble(2))):
        rng = np.random.default_rng(5)
        settings_ = ens.draw(4, rng)
        shadow = Shadow(ensemble=ens, settings=settings_, qubit_site=np.arange(ens.n_qubits),
                        record_setting=rng.integers(0, 4, 25), counts=rng.integers(1, 4, 25),
                        outcomes=rng.integers(0, 2, (25, ens.n_qubits), dtype=np.uint8),
                        label={"time": 0.25}, metadata={"noise": {"readout": 0.01}}, seed=3)
        paths[kind] = str(folder / f"{kind}.nc")
        write_shadow(shadow, paths[kind])
    return paths


ATTRS = ["file_kind", "schema_version", "ensemble", "depth", "n_qubits", "model_spec", "label", "metadata",
         "seed", "source"]
VARIABLES = ["setting_id", "basis", "gate", "coupling", "gate_qubits", "tableau_x", "tableau_z", "tableau_sign",
             "qubit_site", "record_setting", "outcome", "count"]


def nested(depth):
    return "[" * depth + "]" * depth


attr_values = st.one_of(
    st.text(max_size=12), st.integers(-2**40, 2**40), st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(), st.lists(st.integers(-5, 5), min_size=1, max_size=3).map(np.array),
    st.sampled_from(['{"time": 1e400}', '{"time": NaN}', "[1, 2]", '{"a": 1}', "{", "null", '{"time": "x"}',
                     "local", "shallow", "global", "manybody shadow", "manybody settings", "1", "-1", "abc"]),
    st.integers(1, 5000).map(nested), st.integers(1, 30).map(lambda d: '{"a": ' + nested(d) + "}"))


@st.composite
def mutations(draw):
    if draw(st.booleans()):
        return "attr", draw(st.sampled_from(ATTRS)), draw(attr_values)
    name = draw(st.sampled_from(VARIABLES))
    how = draw(st.sampled_from(["value", "value", "dtype", "drop", "length"]))
    arg = {"value": st.integers(-2**31, 2**40), "dtype": st.sampled_from(["float64", "int8", "int64", "uint64"]),
           "drop": st.none(), "length": st.integers(0, 6)}[how]
    return "var", name, (how, draw(arg), draw(st.integers(0, 10**6)))


def mutate(ds, change):
    what, name, arg = change
    if what == "attr":
        ds.attrs[name] = arg
        return ds
    assume(name in ds.variables)
    how, value, where = arg
    var = ds[name]
    if how == "drop":
        return ds.drop_vars(name)
    if how == "dtype":
        return ds.assign({name: (var.dims, var.values.astype(value), var.attrs)})
    if how == "length":
        return ds.drop_vars(name).assign({name: ((name + "_dim",) + var.dims[1:],
                                                 np.resize(var.values, (value,) + var.shape[1:]))})
    values = var.values.copy()
    assume(values.size > 0)
    flat = values.reshape(-1)
    info = np.iinfo(values.dtype) if values.dtype.kind in "iu" else None
    flat[where % flat.size] = value if info is None else int(np.clip(value, info.min, info.max))
    return ds.assign({name: (var.dims, values, var.attrs)})


def check_consistent(shadow: Shadow):
    """What an accepted file promises to the estimators."""
    n, ids = shadow.n_qubits, shadow.settings.ids
    assert len(np.unique(ids)) == len(ids) and shadow.qubit_site.shape == (n,)
    if shadow.settings.basis is not None:
        assert shadow.settings.basis.shape == (len(ids), n) and shadow.settings.basis.max(initial=0) <= 2
    if shadow.settings.gates is not None:
        assert shadow.settings.gates.max(initial=0) < 11520
    if shadow.settings.tableau_x is not None:
        assert set(np.unique(shadow.settings.tableau_x)) <= {0, 1}
        assert set(np.unique(shadow.settings.tableau_sign)) <= {-1, 1}
    for pos, bits, counts in shadow.chunks(size=8):
        assert pos.min(initial=0) >= 0 and pos.max(initial=0) < len(ids)
        assert bits.shape[1] == n and set(np.unique(bits)) <= {0, 1} and counts.min(initial=0) >= 0
    assert isinstance(shadow.label, dict) and isinstance(shadow.metadata, dict)


@settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                   HealthCheck.filter_too_much])
@given(kind=st.sampled_from(["local", "shallow", "global"]), change=mutations())
def test_fuzz_shadow_files(good_files, kind, change):
    ds = xr.load_dataset(good_files[kind], engine="h5netcdf")
    with tempfile.TemporaryDirectory() as folder:
        path, copy = os.path.join(folder, "bad.nc"), os.path.join(folder, "copy.nc")
        try:
            mutate(ds, change).to_netcdf(path, engine="h5netcdf")
        except Exception:  # noqa: BLE001 - xarray or h5netcdf cannot write this change: nothing to test
            assume(False)
        before = digest(path)
        try:
            shadow = read_shadow(path)
            check_consistent(shadow)
            shadow.n_snapshots
            write_shadow(shadow, copy)
            again = read_shadow(copy)
            assert json.dumps(again.label) == json.dumps(shadow.label)
            for a, b in zip(shadow.records(), again.records()):
                assert all(np.array_equal(x, y) for x, y in zip(a, b))
        except InputError as exc:
            message = str(exc)
            assert "\n" not in message and message.startswith(path), message
        assert digest(path) == before
        assert set(os.listdir(folder)) <= {"bad.nc", "copy.nc"}
