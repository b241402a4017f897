"""The example records shipped with the package: regenerated bit for bit, and physics that matches t = 0.5."""

import os

import manybody as mb
from manybody.demo import EXAMPLE_RECORDS, SPEC_NAMES, _spec, example_records
from tests.helpers import within

PACKAGE = os.path.join(os.path.dirname(os.path.abspath(mb.__file__)), "demo_specs")


def test_shipped_records_are_what_example_records_writes(tmp_path):
    path = tmp_path / "run7.csv"
    example_records(str(path))
    with open(os.path.join(PACKAGE, EXAMPLE_RECORDS)) as shipped:
        assert path.read_text() == shipped.read()


def test_readme_ingest_step_gives_the_quench_state_at_half_time(tmp_path):
    # As in the README: prepare (shallow, depth 1, 200 settings, seed 7), ingest run7.csv with the
    # settings and the model, estimate. The exact energy of |0...0> evolved under H is conserved:
    # <H> = -J (n - 1) = -11 for the 12-site chain (only ZZ bonds contribute in |0...0>; textbook).
    model = mb.load_model(_spec(SPEC_NAMES[0]))
    settings = mb.draw_settings(model, "shallow", 1, 200, 7)
    settings.to_netcdf(tmp_path / "settings.nc")
    shadow = mb.ingest(os.path.join(PACKAGE, EXAMPLE_RECORDS), settings=str(tmp_path / "settings.nc"),
                       model=_spec(SPEC_NAMES[0]), label=["time=0.5"])
    assert shadow.n_snapshots == 2000 and shadow.label == {"time": 0.5}
    ds = mb.estimate(shadow, quantities=("energy", "correlations"))
    assert within(float(ds.energy), float(ds.energy_err), -11.0)[0]
    exact = mb.reference(model, "zero", [0.5])
    pair = {"axis_a": "Z", "axis_b": "Z", "site_a": 5, "site_b": 6}
    assert within(float(ds.correlation.sel(**pair)), float(ds.correlation_err.sel(**pair)),
                  float(exact.correlation.sel(**pair)))[0]
