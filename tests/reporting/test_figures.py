"""Reports and the demo: figures with the right axes, the summary, the demo against exact values."""

import os

import matplotlib.image as mpimg
import numpy as np
import pytest

from manybody.demo import run_demo
from manybody.reporting import figures as report


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    return out, run_demo(str(out), quick=True, say=lambda *a: None)


def test_demo_energies_agree_with_exact(demo):
    # The exact references come from dense states (scipy); the demo's estimates lie within
    # 4 error bars of them (robust estimates for the noisy quench run).
    _, runs = demo
    for results, exact, _ in runs.values():
        diff = np.abs(results.energy.values - exact.energy.values)
        assert np.all(diff <= 4 * results.energy_err.values)


def test_demo_writes_figures_and_summaries(demo):
    out, runs = demo
    for _, _, figures in runs.values():
        for path in figures:
            assert os.path.getsize(path) > 0
            if path.endswith(".png"):
                image = mpimg.imread(path)
                assert image.shape[0] > 100 and image.shape[1] > 100 and image.std() > 0
    assert os.path.exists(out / "quench" / "report" / "series.png")
    assert os.path.exists(out / "ground_state" / "report" / "correlation_on_lattice.png")
    text = (out / "quench" / "summary.txt").read_text() if (out / "quench" / "summary.txt").exists() else \
        (out / "quench" / "report" / "summary.txt").read_text()
    assert "t = 0.5" in text and "energy per site" in text and "exact" in text


def test_figure_axes_labels(demo):
    _, runs = demo
    quench, exact, _ = runs["quench"]
    fig = report.series_plot(quench, exact)
    labels = [(ax.get_xlabel(), ax.get_ylabel()) for ax in fig.axes]
    assert ("time (units of 1/J)", "Renyi-2 entropy S2 (nats)") in labels
    ground, gexact, _ = runs["ground_state"]
    fig = report.correlation_on_lattice(ground)
    assert fig.axes[0].get_xlabel() == "x (lattice spacings)"
    fig = report.renyi_profile(ground, gexact)
    assert fig.axes[0].get_xlabel() == "subsystem size (sites)"
    assert fig.axes[0].get_ylabel() == "Renyi-2 entropy S2 (nats)"
    fig = report.mutual_information_map(ground)
    assert fig.axes[0].get_xlabel() == "site b" and fig.axes[1].get_ylabel() == "I2 (nats)"


def test_demo_specs_in_package_match_demo_runs():
    here = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    for name in ("tfim_chain.toml", "heisenberg_patch.toml"):
        with open(os.path.join(here, "demo_runs", name)) as a, open(os.path.join(here, "manybody", "demo_specs",
                                                                                   name)) as b:
            assert a.read() == b.read()
