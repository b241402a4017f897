"""The report refuses what it cannot compare: foreign files, and references of other times, sizes or regions."""

import numpy as np
import pytest

import manybody as mb
from manybody.cli.parser import main
from manybody.io.results import write_dataset
from manybody.io.shadow import write_shadow
from manybody.reporting.frames import match_reference
from manybody.reporting.summary import summary_table

SPEC = '[lattice]\nkind = "chain"\nsize = [{n}]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 1.0\n'


@pytest.fixture(scope="module")
def quench(tmp_path_factory):
    """Estimates of a 6-site Ising quench at t = 0, 0.5 and exact references, as files."""
    folder = tmp_path_factory.mktemp("match")
    model = mb.parse_model(SPEC.format(n=6))
    shadows = mb.simulate(model, "zero", snapshots=600, times=[0.0, 0.5], seed=11)
    results = mb.estimate_series(shadows, subsystems="0;0-2", quantities=("energy", "correlations", "purity"))
    paths = {"results": folder / "results.nc", "exact": folder / "exact.nc", "other_times": folder / "t.nc",
             "other_size": folder / "n.nc", "ground": folder / "g.nc", "fewer": folder / "f.nc"}
    write_dataset(results, paths["results"])
    write_dataset(mb.reference(model, "zero", [0.0, 0.25, 0.5], "0;0-2"), paths["exact"])
    write_dataset(mb.reference(model, "zero", [0.0, 0.25], "0;0-2"), paths["other_times"])
    write_dataset(mb.reference(mb.parse_model(SPEC.format(n=5)), "zero", [0.0, 0.5], "0;0-2"), paths["other_size"])
    write_dataset(mb.reference(model, "ground", None, "0;0-2"), paths["ground"])
    write_dataset(mb.reference(model, "zero", [0.0, 0.5], "0"), paths["fewer"])
    return folder, paths, results


def _run(capsys, *argv):
    code = main(["report", *map(str, argv)])
    return code, capsys.readouterr()


def test_matching_reference_is_compared_at_the_same_times(quench, capsys, tmp_path):
    _, paths, results = quench
    code, out = _run(capsys, paths["results"], "--reference", paths["exact"], "-o", tmp_path / "r")
    assert code == 0, out.err
    text = (tmp_path / "r" / "summary.txt").read_text(encoding="utf-8")
    # The exact value listed at t = 0.5 is the reference at t = 0.5, not at t = 0.25 (its neighbour on the grid).
    import xarray as xr

    exact = xr.load_dataset(paths["exact"])
    block = text.split("t = 0.5")[1]
    line = next(row for row in block.splitlines() if row.strip().startswith("energy "))
    assert float(line.split()[-2]) == pytest.approx(float(exact.energy.sel(time=0.5)), rel=1e-4)
    ref = match_reference(results, exact)
    np.testing.assert_array_equal(ref.time.values, results.time.values)


@pytest.mark.parametrize("which, words", [
    ("other_times", "no value at t = 0.5"),
    ("other_size", "it has 5 sites, the results 6"),
    ("ground", "reference has no time"),
    ("fewer", "no subsystem 0-2"),
])
def test_mismatched_reference_is_refused_in_one_sentence(quench, capsys, tmp_path, which, words):
    _, paths, _ = quench
    code, out = _run(capsys, paths["results"], "--reference", paths[which], "-o", tmp_path / "r")
    assert code == 2 and words in out.err and "refusing to compare" in out.err
    assert len(out.err.strip().splitlines()) == 1 and "Traceback" not in out.err
    assert not (tmp_path / "r").exists()  # nothing written, not even an empty summary


def test_model_or_state_attributes_must_agree_when_both_carry_them(quench):
    # Estimates do not record the state today; when a dataset does, a reference of another state is refused.
    _, paths, results = quench
    import xarray as xr

    exact = xr.load_dataset(paths["exact"])
    labelled = results.assign_attrs(state="neel")
    with pytest.raises(mb.InputError, match="its state differs from that of the results"):
        match_reference(labelled, exact.assign_attrs(state="zero"))
    assert match_reference(results.assign_attrs(state="zero"), exact.assign_attrs(state="zero")) is not None


def test_reference_given_as_results_is_refused(quench, capsys, tmp_path):
    _, paths, _ = quench
    code, out = _run(capsys, paths["exact"], "-o", tmp_path / "r")
    assert code == 2 and "is an exact reference, not a results dataset" in out.err


@pytest.mark.parametrize("content", [b"not a netcdf file\n", b""])
def test_non_results_file_is_refused(capsys, tmp_path, content):
    path = tmp_path / "notes.nc"
    path.write_bytes(content)
    code, out = _run(capsys, path, "-o", tmp_path / "r")
    assert code == 2 and "not a results dataset" in out.err and len(out.err.strip().splitlines()) == 1
    assert not (tmp_path / "r").exists()


def test_netcdf_without_estimates_is_refused(capsys, tmp_path):
    import xarray as xr

    path = tmp_path / "other.nc"
    write_dataset(xr.Dataset({"temperature": ("x", np.arange(3.0))}), path)
    code, out = _run(capsys, path, "-o", tmp_path / "r")
    assert code == 2 and "not a results dataset from 'manybody estimate'" in out.err
    assert not (tmp_path / "r").exists()


def test_shadow_file_is_refused(capsys, tmp_path):
    model = mb.parse_model(SPEC.format(n=3))
    path = tmp_path / "shadow.nc"
    write_shadow(mb.simulate(model, "zero", snapshots=50, seed=1), path)
    code, out = _run(capsys, path, "-o", tmp_path / "r")
    assert code == 2 and "not a results dataset (run 'manybody estimate' on it first)" in out.err


def test_options_time_axis_format(quench, capsys, tmp_path):
    _, paths, _ = quench
    code, out = _run(capsys, paths["results"], "--reference", paths["exact"], "-o", tmp_path / "r", "--time", "0.5",
                     "--axis", "XX", "--format", "pdf", "--dpi", "80")
    assert code == 0, out.err
    names = sorted(p.name for p in (tmp_path / "r").iterdir())
    assert "correlation_map_t0.5.pdf" in names and not any("_t0." in n and "0.5" not in n for n in names)
    code, out = _run(capsys, paths["results"], "-o", tmp_path / "s", "--time", "0.25")
    assert code == 2 and "not among the times of the results (0, 0.5)" in out.err


def test_summary_lists_every_subsystem_with_z(quench):
    _, paths, results = quench
    import xarray as xr

    text = summary_table(results, xr.load_dataset(paths["exact"]))
    assert text.count("S2(0) [1 site]") == 2 and text.count("S2(0-2) [3 sites]") == 2
    assert "largest |z|" in text and "<σx_5>" in text
