"""Report figures read back through the Figure objects: titles, labels, ticks, panels, colour limits."""

import os

import numpy as np
import pytest

import manybody as mb
from manybody.demo import run_demo
from manybody.reporting import figures as report
from manybody.reporting.lattice import nearest_neighbour_bonds


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    return out, run_demo(str(out), quick=True, say=lambda *a: None)


def _images(fig):
    return [im for ax in fig.axes for im in ax.get_images()] + \
        [c for ax in fig.axes for c in ax.collections if c.get_array() is not None and c.norm is not None]


def _symmetric(fig):
    """Every colour-mapped artist of a signed quantity has limits -m, m."""
    for artist in _images(fig):
        lo, hi = artist.get_clim()
        assert lo == pytest.approx(-hi) and hi > 0


def test_demo_energies_agree_with_exact(demo):
    # The exact references come from dense states (scipy); the demo's estimates lie within
    # 4 error bars of them (robust estimates for the noisy quench run).
    _, runs = demo
    for key in ("quench", "ground_state"):
        results, exact, _ = runs[key]
        diff = np.abs(results.energy.values - exact.energy.values)
        assert np.all(diff <= 4 * results.energy_err.values)


def test_every_figure_names_time_ensemble_and_snapshots(demo):
    _, runs = demo
    quench, exact, _ = runs["quench"]
    figs = report.figures(quench, exact)
    assert "correlation_map_t0.5.png" in figs and "renyi2_series.png" in figs and "correlation_series.png" in figs
    for name, fig in figs.items():
        top = fig._suptitle.get_text()
        assert "local ensemble" in top and f"{quench.attrs['n_snapshots']} snapshots" in top, name
        if "_t" in name:
            t = name.split("_t")[-1].removesuffix(".png")
            assert f"t = {t}" in top, name
    assert "t = 0, 0.5, 1" in figs["renyi2_series.png"]._suptitle.get_text()


def test_chosen_time_gives_one_set_of_maps(demo):
    _, runs = demo
    quench, exact, _ = runs["quench"]
    figs = report.figures(quench, exact, time=0.5)
    maps = [n for n in figs if n.startswith("correlation_map")]
    assert maps == ["correlation_map_t0.5.png"]
    with pytest.raises(mb.InputError, match="not among the times"):
        report.figures(quench, exact, time=0.7)


def test_lattice_figures_estimate_exact_z_side_by_side(demo):
    _, runs = demo
    ground, gexact, _ = runs["ground_state"]
    fig = report.correlation_on_lattice(ground, gexact)
    panels = [ax for ax in fig.axes if ax.get_title()]
    assert [ax.get_title().split(": ")[-1] for ax in panels] == ["estimate", "exact", "z-score"]
    assert panels[0].get_xlabel() == "x (lattice spacings)"
    assert [t.get_text() for t in panels[0].get_xticklabels() if t.get_text()] == ["0", "1", "2"]
    # the 12 bonds of a 3 x 3 open square lattice (networkx grid_2d_graph has 2 * 3 * 2 = 12 edges)
    import networkx as nx

    assert len(panels[0].collections[0].get_segments()) == nx.grid_2d_graph(3, 3).number_of_edges()
    _symmetric(fig)
    colour_labels = [ax.get_ylabel() for ax in fig.axes if not ax.get_title()]
    assert any(r"\sigma^z" in lab for lab in colour_labels)
    assert "(estimate $-$ exact) / error" in colour_labels[-1]


def test_estimate_and_exact_share_one_colour_scale(demo):
    _, runs = demo
    ground, gexact, _ = runs["ground_state"]
    fig = report.energy_density_plot(ground, gexact)
    scatters = [c for ax in fig.axes for c in ax.collections if c.get_array() is not None]
    assert scatters[0].get_clim() == scatters[1].get_clim()
    np.testing.assert_allclose(np.sort(scatters[1].get_array()), np.sort(gexact.energy_density.values))


def test_chain_figures_have_integer_site_ticks_and_z_panel(demo):
    _, runs = demo
    quench, exact, _ = runs["quench"]
    d, r = quench.isel(time=-1), exact.isel(time=-1)
    fig = report.energy_density_plot(d, r)
    assert len(fig.axes) == 2 and fig.axes[1].get_xlabel() == "site $i$"
    ticks = [float(t) for t in fig.axes[1].get_xticks()]
    assert all(t == int(t) for t in ticks)
    assert fig.axes[0].get_ylabel() == "$e_i$ (energy unit of the couplings)"
    fig = report.correlation_map(d, r)
    assert [ax.get_title() for ax in fig.axes if ax.get_title()] == ["estimate", "exact", "z-score"]
    assert fig.axes[0].get_xlabel() == "site b"
    _symmetric(fig)
    fig = report.magnetization_plot(d, r, axis="X")
    assert fig.axes[0].get_ylabel() == r"$\langle \sigma^x_{i} \rangle$"


def test_renyi_profile_by_label_not_only_size():
    # Two different 4-site regions of a 3 x 3 lattice must get two x positions.
    model = mb.parse_model('[lattice]\nkind = "square"\nsize = [3, 3]\n[model]\nkind = "heisenberg"\n')
    shadow = mb.simulate(model, "ground", snapshots=400, seed=3)
    ds = mb.estimate(shadow, subsystems="0-3;0,1,3,4;0", quantities=("purity",))
    fig = report.renyi_profile(ds)
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert labels == ["0\n(1)", "0-3\n(4)", "0,1,3,4\n(4)"]
    assert ax.get_xlabel() == "subsystem $A$ (number of sites)" and "$S_2(A)$" in ax.get_ylabel()


def test_series_small_multiples_one_panel_per_subsystem(demo):
    _, runs = demo
    quench, exact, _ = runs["quench"]
    fig = report.renyi2_series(quench, exact)
    visible = [ax for ax in fig.axes if ax.get_visible()]
    assert [ax.get_title() for ax in visible] == [
        f"A = {s} ({n} site{'s' * int(n != 1)})" for s, n in zip(quench.subsystem.values, quench.subsystem_size.values)]
    assert visible[-1].get_xlabel() == r"time $t$ (1/energy unit of the couplings, $\hbar = 1$)"
    fig = report.correlation_series(quench, exact)
    legend = fig.axes[0].get_legend()
    assert legend is not None and legend.get_bbox_to_anchor().x0 > fig.axes[0].get_window_extent().x1 - 1


def test_structure_factor_on_reciprocal_lattice_with_normalisation():
    # S(q) needs a periodic lattice; a 3 x 3 periodic square Heisenberg patch (9 qubits, dense).
    spec = '[lattice]\nkind = "square"\nsize = [3, 3]\nboundary = "periodic"\n[model]\nkind = "heisenberg"\n'
    model = mb.parse_model(spec)
    ds = mb.estimate(mb.simulate(model, "ground", snapshots=600, seed=5), quantities=("correlations",))
    exact = mb.reference(model, "ground")
    figs = report.figures(ds, exact)
    fig = figs["structure_factor.png"]
    assert r"(1/n)\,\Sigma_{ab}" in fig._suptitle.get_text()
    panels = [ax for ax in fig.axes if ax.get_title()]
    assert len(panels) == 3 and panels[0].get_xlabel() == r"$q_x/\pi$ ($q$ in 1/lattice spacing)"
    points = panels[1].collections[0].get_offsets()
    np.testing.assert_allclose(np.sort(points[:, 0]), np.sort(exact.qx.values / np.pi))
    # The exact S^zz(q) at the 9 points of the reciprocal lattice is what the middle panel shows.
    np.testing.assert_allclose(np.sort(panels[1].collections[0].get_array()),
                               np.sort(exact.structure_factor.sel(axis="Z").values))


def test_bonds_from_positions_match_networkx():
    # networkx's triangular lattice graph with unit spacing: nearest neighbours at distance 1.
    import networkx as nx

    g = nx.triangular_lattice_graph(2, 4)
    pos = np.array([g.nodes[n]["pos"] for n in g.nodes])
    bonds = nearest_neighbour_bonds(pos[:, 0], pos[:, 1])
    assert len(bonds) == g.number_of_edges()


def test_report_files_and_formats(demo, tmp_path):
    out, runs = demo
    assert all(os.path.exists(out / n) for n in ("tfim_chain.toml", "heisenberg_patch.toml", "run7.csv"))
    ground, gexact, written = runs["ground_state"]
    assert any(p.endswith("correlation_on_lattice.png") for p in written)
    paths = report.write_report(ground, tmp_path / "svg", gexact, fmt="svg", dpi=72)
    assert all(p.endswith((".svg", "summary.txt")) for p in paths)
    text = (tmp_path / "svg" / "summary.txt").read_text(encoding="utf-8")
    for label in ground.subsystem.values:
        assert f"S2({label})" in text
    assert "<σz_4>" in text and "largest |z|" in text and "exact" in text


def test_importing_does_not_touch_pyplot_state():
    import subprocess
    import sys

    code = ("import sys, manybody, manybody.reporting.figures, manybody.demo; "
            "print('matplotlib.pyplot' in sys.modules)")
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip() == "False"


def test_demo_specs_in_package_match_demo_runs():
    here = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    for name in ("tfim_chain.toml", "heisenberg_patch.toml"):
        with open(os.path.join(here, "demo_runs", name)) as a, open(os.path.join(here, "manybody", "demo_specs",
                                                                                   name)) as b:
            assert a.read() == b.read()


def test_shallow_ensemble_figures_name_the_depth():
    model = mb.parse_model('[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\n')
    shadow = mb.simulate(model, "ground", snapshots=300, ensemble="shallow", depth=1, seed=4)
    ds = mb.estimate(shadow, quantities=("energy", "correlations"))
    for fig in report.figures(ds).values():
        assert "shallow ensemble, depth 1, 300 snapshots" in fig._suptitle.get_text()
