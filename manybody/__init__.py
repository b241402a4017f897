"""manybody: physics from randomized measurements (classical shadows) of many-body states.

    import manybody as mb
    model = mb.load_model("chain.toml")
    shadow = mb.simulate(model, "ground", snapshots=20000, seed=1)
    results = mb.estimate(shadow, subsystems=["0-3"])
    exact = mb.reference(model, "ground", subsystems=["0-3"])
    figures = mb.report(results, exact)

See docs/python-api.md for a worked example and docs/formats.md for the
results schema. Importing manybody changes no global state.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("manybody")
except PackageNotFoundError:  # running from a source tree
    __version__ = "0.1.0"

from manybody.api import (
    draw_settings,
    estimate,
    estimate_series,
    ingest,
    load_model,
    open_shadow,
    overlap,
    parse_model,
    plan,
    reference,
    report,
    simulate,
)
from manybody.errors import InputError
from manybody.simulation.noise import Noise

__all__ = ["load_model", "parse_model", "draw_settings", "ingest", "open_shadow", "simulate", "estimate",
           "estimate_series", "overlap", "reference", "plan", "report", "InputError", "Noise", "__version__"]
