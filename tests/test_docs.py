"""The worked example of docs/python-api.md runs as written, and importing manybody changes no global state."""

import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]


def python_blocks(path):
    return re.findall(r"```python\n(.*?)```", path.read_text(), flags=re.S)


def test_python_api_example_runs(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # nothing may be written, but if it were, not into the repository
    blocks = python_blocks(ROOT / "docs" / "python-api.md")
    assert len(blocks) >= 5
    namespace = {}
    for block in blocks:
        exec(compile(block, "docs/python-api.md", "exec"), namespace)  # our own documentation, not user text
    results, exact = namespace["evolution"], namespace["exact"]
    assert "time" in results.dims and results.sizes["time"] == 3
    # S2 of the product state |0...0> at t = 0 is 0 (a fact of the trade), within 4 error bars
    s2 = results.renyi2.sel(subsystem="0-3").isel(time=0)
    err = results.renyi2_err.sel(subsystem="0-3").isel(time=0)
    assert abs(float(s2)) <= 4 * float(err)
    assert set(exact.renyi2.subsystem.values) == {"0-3", "0,5"}
    assert not list(tmp_path.iterdir())  # no file written unless asked


def test_import_changes_no_global_state():
    code = ("import sys, matplotlib; before = matplotlib.get_backend(); import manybody as mb; "
            "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot imported'; "
            "assert matplotlib.get_backend() == before; "
            "assert set(mb.__all__) >= {'load_model', 'parse_model', 'draw_settings', 'ingest', 'open_shadow', "
            "'simulate', 'estimate', 'estimate_series', 'reference', 'plan', 'report'}; print('ok')")
    env = {**os.environ, "PYTHONPATH": str(ROOT), "MPLBACKEND": "svg"}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert out.returncode == 0 and out.stdout.strip() == "ok", out.stderr


def test_library_errors_name_the_argument_and_the_command_line_its_option(tmp_path):
    import manybody as mb

    model = mb.parse_model('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\n')
    shadow = mb.simulate(model, "zero", snapshots=200, seed=1)
    try:
        mb.estimate(shadow, subsystems="0-9")
    except mb.InputError as error:
        assert str(error).startswith("subsystems '0-9'") and error.argument == "subsystems"
    else:
        raise AssertionError("no error for a site outside the lattice")
    spec = tmp_path / "chain.toml"
    spec.write_text('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\n')
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    out = subprocess.run([sys.executable, "-m", "manybody", "reference", str(spec), "--state", "zero",
                          "--subsystems", "0-9", "-o", str(tmp_path / "x.nc")], capture_output=True, text=True,
                         env=env, timeout=120)
    assert out.returncode == 2 and "--subsystems '0-9'" in out.stderr and "Traceback" not in out.stderr
    assert np.isfinite(float(shadow.n_snapshots))


def test_shadow_round_trip_through_the_api(tmp_path):
    # What a notebook writes, it reads back: the same records, the model stored with them.
    import manybody as mb

    model = mb.parse_model('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\n')
    shadow = mb.simulate(model, "neel", snapshots=300, seed=2)
    shadow.to_netcdf(tmp_path / "s.nc")
    again = mb.open_shadow(tmp_path / "s.nc")
    assert again.n_snapshots == shadow.n_snapshots == 300
    assert again.model.n_sites == 4 and again.model.hamiltonian.n_terms == model.hamiltonian.n_terms
    first, second = mb.estimate(shadow), mb.estimate(again)
    assert float(first.energy) == float(second.energy)
