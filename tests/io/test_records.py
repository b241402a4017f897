"""Records CSV parsing and ingestion: good files, and one-sentence errors for bad ones."""

import numpy as np
import pytest

from manybody.errors import InputError
from manybody.io.ingest import ingest, parse_labels
from manybody.io.records import read_records
from manybody.io.shadow import Shadow, read_shadow
from manybody.measure.ensembles import LocalEnsemble, basis_strings


def write(tmp_path, text, name="records.csv"):
    path = tmp_path / name
    path.write_bytes(text.encode())
    return path


def test_parse_with_counts_crlf_and_blank_lines(tmp_path):
    path = write(tmp_path, "setting,basis,outcome,count\r\n17,XZZYX,01101,3\r\n\r\n4,YYYYY,11111,10\r\n2,ZZZZZ,00000,0")
    blocks = list(read_records(path))
    setting = np.concatenate([b.setting for b in blocks])
    assert setting.tolist() == [17, 4, 2]
    assert np.concatenate([b.count for b in blocks]).tolist() == [3, 10, 0]
    outcome = np.concatenate([b.outcome for b in blocks])
    assert outcome[0].tolist() == [0, 1, 1, 0, 1]
    basis = np.concatenate([b.basis for b in blocks])
    assert basis_strings(basis) == ["XZZYX", "YYYYY", "ZZZZZ"]
    assert np.concatenate([b.line for b in blocks]).tolist() == [2, 4, 5]


def test_small_blocks_agree_with_one_block(tmp_path):
    rng = np.random.default_rng(0)
    rows = ["setting,outcome,basis"]
    for k in range(500):
        rows.append(f"{k % 37},{''.join(rng.choice(list('01'), 6))},{'XYZXYZ'[k % 37 % 6] * 6}")
    path = write(tmp_path, "\n".join(rows) + "\n")
    one = list(read_records(path))
    many = list(read_records(path, block_bytes=64))
    for name in ("setting", "outcome", "basis", "line"):
        a = np.concatenate([getattr(b, name) for b in one])
        b = np.concatenate([getattr(b, name) for b in many])
        assert np.array_equal(a, b)


def ingested(path, settings=None, **kw):
    out = path.parent / (path.stem + ".nc")
    ingest(path, out, settings, **kw)
    return read_shadow(out)


def test_ingest_builds_settings_from_local_records(tmp_path):
    path = write(tmp_path, "setting,basis,outcome\n5,XY,01\n5,XY,11\n2,ZZ,00\n")
    shadow = ingested(path, label={"time": 0.5})
    assert shadow.settings.ids.tolist() == [2, 5]
    assert basis_strings(shadow.settings.basis) == ["ZZ", "XY"]
    assert np.concatenate([c[0] for c in shadow.chunks()]).tolist() == [1, 1, 0]
    assert shadow.n_snapshots == 3 and shadow.label == {"time": 0.5}


@pytest.mark.parametrize("text,needle", [
    ("", "the file is empty"),
    ("setting,basis,outcome\n", "header but no records"),
    ("setting,basis\n1,XX\n", "no 'outcome' column"),
    ("setting,basis,outcome,colour\n1,XX,00,red\n", "unknown column 'colour'"),
    ("setting,basis,outcome\n1,XX,00\n2,XYZ,00\n", "line 3: basis 'XYZ' has 3 characters, expected 2"),
    ("setting,basis,outcome\n1,XX,00\n2,XY,0\n", "line 3: outcome '0' has 1 characters, expected 2"),
    ("setting,basis,outcome\n1,XQ,00\n", "line 2: basis 'XQ' has a character other than X, Y and Z"),
    ("setting,basis,outcome\n1,XX,02\n", "line 2: outcome '02' has a character other than 0 and 1"),
    ("setting,basis,outcome,count\n1,XX,00,-3\n", "line 2: count '-3' is not a non-negative integer"),
    ("setting,basis,outcome,count\n1,XX,00,2.5\n", "line 2: count '2.5' is not a non-negative integer"),
    ("setting,basis,outcome\nseven,XX,00\n", "line 2: setting 'seven' is not a non-negative integer"),
    ("setting,basis,outcome\n1,XX,00,4\n", "line 2: expected 3 fields (setting,basis,outcome), found 4"),
    ("setting,basis,outcome\n1,XX,00\n1,XZ,01\n", "line 3: setting 1 has basis XZ here but XX on line 2"),
])
def test_bad_records_one_sentence(tmp_path, text, needle):
    path = write(tmp_path, text)
    with pytest.raises(InputError) as info:
        ingest(path, tmp_path / "out.nc")
    message = str(info.value)
    assert needle in message and message.startswith(str(path))
    assert "\n" not in message
    assert sorted(p.name for p in tmp_path.iterdir()) == ["records.csv"]  # nothing half-written


def test_basis_disagreement_across_blocks(tmp_path):
    rows = ["setting,basis,outcome"] + ["1,XX,00"] * 50 + ["1,YY,00"]
    path = write(tmp_path, "\n".join(rows) + "\n")
    blocks_small = 40  # forces several blocks
    from manybody.io import records

    old = records.BLOCK_BYTES
    records.BLOCK_BYTES = blocks_small  # read_records reads it at call time
    try:
        with pytest.raises(InputError, match="line 52: setting 1 has basis YY here but XX on line 2"):
            ingest(path, tmp_path / "out.nc")
    finally:
        records.BLOCK_BYTES = old


def test_settings_file_checks(tmp_path):
    ens = LocalEnsemble(2)
    settings = ens.draw(3, 0)
    shadow = Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(2))
    b = basis_strings(settings.basis)
    good = write(tmp_path, f"setting,basis,outcome\n0,{b[0]},01\n2,{b[2]},10\n")
    out = ingested(good, shadow)
    assert np.concatenate([c[0] for c in out.chunks()]).tolist() == [0, 2]
    missing = write(tmp_path, f"setting,basis,outcome\n0,{b[0]},01\n9,{b[0]},10\n", "missing.csv")
    with pytest.raises(InputError, match="line 3: setting 9 is not in the settings file"):
        ingest(missing, tmp_path / "o.nc", shadow)
    other = "XX" if b[1] != "XX" else "YY"
    wrong = write(tmp_path, f"setting,basis,outcome\n1,{other},01\n", "wrong.csv")
    with pytest.raises(InputError, match=f"line 2: setting 1 has basis {other} but"):
        ingest(wrong, tmp_path / "o.nc", shadow)


def test_labels():
    assert parse_labels(["time=0.5", "run=A7"]) == {"time": 0.5, "run": "A7"}
    with pytest.raises(InputError, match="expected KEY=VALUE"):
        parse_labels(["time"])


def test_large_setting_ids(tmp_path):
    path = write(tmp_path, "setting,basis,outcome\n7,XY,11\n5000000000,ZZ,01\n7,XY,00\n")
    shadow = ingested(path)
    assert shadow.settings.ids.tolist() == [7, 5000000000]
    assert basis_strings(shadow.settings.basis) == ["XY", "ZZ"]
    bad = write(tmp_path, "setting,basis,outcome\n7,XY,11\n5000000000,ZZ,01\n5000000000,XZ,00\n", "bad.csv")
    with pytest.raises(InputError, match="line 4: setting 5000000000 has basis XZ here but ZZ on line 3"):
        ingest(bad, tmp_path / "bad.nc")
