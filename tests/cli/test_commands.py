"""The command line through a subprocess: output, exit codes, one-sentence errors."""

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]


def run(*args, cwd=None):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "manybody", *args], capture_output=True, text=True,
                          cwd=cwd or ROOT, env=env, timeout=300)


def test_model_exact_on_demo_chain():
    out = run("model", "demo_runs/tfim_chain.toml", "--exact")
    assert out.returncode == 0, out.stderr
    assert "12 sites, 11 bonds" in out.stdout
    line = next(l for l in out.stdout.splitlines() if l.startswith("ground energy"))
    assert "exact diagonalization" in line
    # the value itself is checked against Pfeuty's solution in test_models; here it must parse
    float(line.split()[2])


def test_help_teaches():
    out = run("model", "--help")
    assert out.returncode == 0 and "example:" in out.stdout and "--exact" in out.stdout


@pytest.mark.parametrize("content,needle", [
    ('[lattice]\nkind = "chain"\nsize = [4]\nfoo = 1\n[model]\nkind = "tfim"\n', "unknown key 'foo'"),
    ("this is not toml", "not valid TOML"),
])
def test_bad_spec_exits_2_with_one_sentence(tmp_path, content, needle):
    spec = tmp_path / "bad.toml"
    spec.write_text(content)
    out = run("model", str(spec))
    assert out.returncode == 2
    assert needle in out.stderr and "Traceback" not in out.stderr
    assert len(out.stderr.strip().splitlines()) == 1


def test_missing_file_and_unknown_option():
    out = run("model", "no/such/file.toml")
    assert out.returncode == 2 and "cannot read" in out.stderr
    out = run("model", "demo_runs/tfim_chain.toml", "--exactly")
    assert out.returncode == 2 and "unrecognized arguments" in out.stderr and "Traceback" not in out.stderr


def test_too_large_for_exact_is_bad_input(tmp_path):
    spec = tmp_path / "big.toml"
    spec.write_text('[lattice]\nkind = "square"\nsize = [6, 6]\n[model]\nkind = "heisenberg"\n')
    out = run("model", str(spec), "--exact")
    assert out.returncode == 2 and "too many for exact diagonalization" in out.stderr


def test_prepare_ingest_round_trip(tmp_path):
    import xarray as xr

    from manybody.io.shadow import read_shadow
    from manybody.measure.ensembles import basis_strings

    settings = tmp_path / "settings.nc"
    out = run("prepare", "demo_runs/tfim_chain.toml", "--ensemble", "local", "--settings", "20", "--seed", "5",
              "-o", str(settings), "--qasm", str(tmp_path / "qasm"))
    assert out.returncode == 0, out.stderr
    assert len(list((tmp_path / "qasm").glob("setting_*.qasm"))) == 20
    bases = basis_strings(read_shadow(settings).settings.basis)
    records = tmp_path / "records.csv"
    records.write_text("setting,basis,outcome,count\n" + "".join(f"{k},{bases[k]},{'01' * 6},2\n" for k in range(20)))
    shadow = tmp_path / "shadow.nc"
    out = run("ingest", str(records), "--settings", str(settings), "--model", "demo_runs/tfim_chain.toml",
              "--label", "time=0.25", "-o", str(shadow))
    assert out.returncode == 0, out.stderr
    assert "40 snapshots" in out.stdout
    ds = xr.open_dataset(shadow, engine="h5netcdf")
    assert ds.sizes["record"] == 20 and '"time": 0.25' in ds.attrs["label"]


def test_same_seed_same_settings_file_content(tmp_path):
    from manybody.io.shadow import read_shadow

    for name in ("a.nc", "b.nc"):
        assert run("prepare", "demo_runs/tfim_chain.toml", "--ensemble", "shallow", "--depth", "2",
                   "--settings", "30", "--seed", "9", "-o", str(tmp_path / name)).returncode == 0
    a, b = read_shadow(tmp_path / "a.nc"), read_shadow(tmp_path / "b.nc")
    assert np.array_equal(a.settings.gates, b.settings.gates) and np.array_equal(a.settings.basis, b.settings.basis)


@pytest.mark.parametrize("content,needle", [
    ("setting,basis,outcome\n1,XXXXXXXXXXXX,000000000000\n2,XX,00\n", "line 3: outcome '00' has 2 characters"),
    ("", "the file is empty"),
    ("setting,outcome\n1,000000000000\n", "no 'basis' column"),
])
def test_ingest_bad_records_exit_2_and_write_nothing(tmp_path, content, needle):
    records = tmp_path / "r.csv"
    records.write_text(content)
    target = tmp_path / "out.nc"
    out = run("ingest", str(records), "-o", str(target))
    assert out.returncode == 2 and needle in out.stderr and "Traceback" not in out.stderr
    assert len(out.stderr.strip().splitlines()) == 1
    assert not target.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["r.csv"]


def test_ingest_missing_setting_and_foreign_settings_file(tmp_path):
    settings = tmp_path / "s.nc"
    assert run("prepare", "demo_runs/tfim_chain.toml", "--ensemble", "shallow", "--settings", "3",
               "--seed", "1", "-o", str(settings)).returncode == 0
    records = tmp_path / "r.csv"
    records.write_text("setting,outcome\n0,000000000000\n7,000000000000\n")
    out = run("ingest", str(records), "--settings", str(settings), "-o", str(tmp_path / "o.nc"))
    assert out.returncode == 2 and "line 3: setting 7 is not in" in out.stderr
    records.write_text("setting,outcome\n0,000000000000\n")
    out = run("ingest", str(records), "--settings", str(records), "-o", str(tmp_path / "o.nc"))
    assert out.returncode == 2 and "not a readable netCDF-4 file" in out.stderr


def test_prepare_bad_options(tmp_path):
    out = run("prepare", "demo_runs/tfim_chain.toml", "--ensemble", "local", "--settings", "0", "-o",
              str(tmp_path / "s.nc"))
    assert out.returncode == 2 and "--settings must be at least 1" in out.stderr
    out = run("prepare", "demo_runs/tfim_chain.toml", "--ensemble", "nowhere", "--settings", "3", "-o",
              str(tmp_path / "s.nc"))
    assert out.returncode == 2 and "invalid choice" in out.stderr


def test_estimate_and_reference_through_the_command_line(tmp_path):
    import xarray as xr

    shadow = tmp_path / "gs.nc"
    assert run("simulate", "demo_runs/tfim_chain.toml", "--state", "ground", "--snapshots", "4000", "--seed", "3",
               "-o", str(shadow)).returncode == 0
    out = run("estimate", str(shadow), "--subsystems", "0-2;4", "-o", str(tmp_path / "r.nc"))
    assert out.returncode == 0, out.stderr
    assert "energy" in out.stdout and "S2[0-2]" in out.stdout
    out = run("reference", "demo_runs/tfim_chain.toml", "--state", "ground", "--subsystems", "0-2;4",
              "-o", str(tmp_path / "e.nc"))
    assert out.returncode == 0, out.stderr
    diff = xr.open_dataset(tmp_path / "r.nc") - xr.open_dataset(tmp_path / "e.nc")
    assert set(diff.subsystem.values) == {"0-2", "4"}


@pytest.mark.parametrize("extra,needle", [
    (["--subsystems", "0-20"], "site 12 is outside the lattice (sites 0 to 11)"),
    (["--subsystems", "1,1"], "a site is repeated"),
    (["--subsystems", "a-b"], "expected an inclusive range"),
    (["--model", "SMALL"], "the model has 4 qubits but the shadow has 12"),
    (["--target", "no_such_state.nc"], "--target 'no_such_state.nc': no such file, and not a state name"),  # ours
])
def test_estimate_bad_input(tmp_path, extra, needle):
    shadow = tmp_path / "gs.nc"
    assert run("simulate", "demo_runs/tfim_chain.toml", "--state", "zero", "--snapshots", "200", "--seed", "1",
               "-o", str(shadow)).returncode == 0
    small = tmp_path / "small.toml"
    small.write_text('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\n')
    extra = [str(small) if e == "SMALL" else e for e in extra]
    out = run("estimate", str(shadow), *extra, "-o", str(tmp_path / "r.nc"))
    assert out.returncode == 2 and needle in out.stderr and "Traceback" not in out.stderr
    assert not (tmp_path / "r.nc").exists()


def test_calibration_from_another_ensemble(tmp_path):
    shadow, cal = tmp_path / "s.nc", tmp_path / "cal.nc"
    assert run("simulate", "demo_runs/tfim_chain.toml", "--state", "zero", "--snapshots", "200", "--seed", "1",
               "-o", str(shadow)).returncode == 0
    assert run("simulate", "demo_runs/tfim_chain.toml", "--state", "zero", "--snapshots", "200", "--seed", "2",
               "--ensemble", "shallow", "--depth", "1", "-o", str(cal)).returncode == 0
    out = run("estimate", str(shadow), "--calibration", str(cal), "-o", str(tmp_path / "r.nc"))
    assert out.returncode == 2 and "was taken with another ensemble" in out.stderr


def test_plan_and_report_commands(tmp_path):
    out = run("plan", "demo_runs/tfim_chain.toml", "--error", "0.05", "--depths", "0,1,2", "-o", str(tmp_path / "p.nc"))
    assert out.returncode == 0, out.stderr
    assert "recommended" in out.stdout and (tmp_path / "p.nc").exists()
    out = run("plan", "demo_runs/tfim_chain.toml", "--error", "-1")
    assert out.returncode == 2 and "--error must be positive" in out.stderr
    out = run("report", str(tmp_path / "absent.nc"), "-o", str(tmp_path / "rep"))
    assert out.returncode == 2 and "no such file" in out.stderr


def test_every_command_help_has_an_example():
    for command in ("model", "plan", "prepare", "ingest", "simulate", "estimate", "reference", "report", "demo"):
        out = run(command, "--help")
        assert out.returncode == 0 and "example" in out.stdout, command
