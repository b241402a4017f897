"""Report figures a group puts on a slide, as matplotlib Figure objects (never pyplot: no global state).

Every figure names what it shows in its title and, in its top line, the
time, the measurement ensemble (and depth) and the number of snapshots.
Values are in the project's units (docs/design.md section 2): Pauli
operators σ, energies in the energy unit of the couplings, times in
1/(that unit) with hbar = 1, entropies in nats. With an exact reference,
estimate and exact value are drawn side by side with the z-score
(estimate - exact)/error, after the reference has been matched to the
results by time and subsystem (:mod:`manybody.reporting.frames`).
"""

from __future__ import annotations

import os

import numpy as np
import xarray as xr
from matplotlib.figure import Figure
from matplotlib.ticker import AutoLocator

from manybody.errors import InputError
from manybody.io.files import atomic_path
from manybody.reporting import frames as fr
from manybody.reporting.lattice import (
    DIVERGING,
    SEQUENTIAL,
    Z_LABEL,
    correlation_label,
    integer_ticks,
    is_chain,
    lattice_panels,
    nearest_neighbour_bonds,
    pauli,
    symmetric_limits,
    z_scores,
)
from manybody.reporting.series import correlation_series, renyi2_series
from manybody.reporting.summary import summary_table

__all__ = ["correlation_map", "correlation_on_lattice", "correlation_series", "energy_density_plot", "figures",
           "magnetization_plot", "mutual_information_map", "renyi2_series", "renyi_profile", "save_report",
           "structure_factor_plot", "summary_table", "write_report"]
FORMATS = ("png", "pdf", "svg")
ENERGY_LABEL = "$e_i$ (energy unit of the couplings)"


def _figure(d, what: str, width: float, height: float = 4.0) -> Figure:
    """A constrained-layout Figure whose top line says time, ensemble, depth and snapshots."""
    fig = Figure(figsize=(width, height), layout="constrained")
    time = f"t = {float(d.time):g}" if "time" in d.coords and d.time.ndim == 0 else \
        str(d.label.values) if "label" in d.coords and d.label.ndim == 0 else fr.frame(d, None)[1]
    fig.suptitle(f"{what}\n{fr.caption(d, time)}", fontsize=10)
    return fig


def _matrix_panels(fig, values, exact, error, label, signed=True):
    """Site-by-site maps: estimate, exact and z-score side by side, integer site ticks."""
    panels = [("estimate", values)] + ([] if exact is None else [("exact", exact)])
    lo, hi = symmetric_limits(values, exact)
    if not signed:
        lo = 0.0
    axes = np.atleast_1d(fig.subplots(1, len(panels) + (exact is not None)))
    for ax, (name, v) in zip(axes, panels):
        im = ax.imshow(v, cmap=DIVERGING if signed else SEQUENTIAL, vmin=lo, vmax=hi, origin="lower")
        fig.colorbar(im, ax=ax, label=label, shrink=0.8)
        ax.set_title(name, fontsize=10)
    if exact is not None:
        z = z_scores(values, error, exact)
        zlo, zhi = symmetric_limits(z, floor=3.0)
        im = axes[-1].imshow(z, cmap=DIVERGING, vmin=zlo, vmax=zhi, origin="lower")
        fig.colorbar(im, ax=axes[-1], label=Z_LABEL, shrink=0.8)
        axes[-1].set_title("z-score", fontsize=10)
    for ax in axes:
        ax.set_xlabel("site b")
        ax.set_ylabel("site a")
        integer_ticks(ax, x=True, y=True)
    return axes


def correlation_map(d, ref=None, axis="Z"):
    """Connected two-point function <σ^α_a σ^α_b> - <σ^α_a><σ^α_b> as a site-by-site map."""
    pick = {"axis_a": axis, "axis_b": axis}
    c = d.connected_correlation.sel(**pick).values
    exact = None if ref is None or "connected_correlation" not in ref else ref.connected_correlation.sel(**pick).values
    fig = _figure(d, f"connected correlation {correlation_label(axis, False)}$_c$", 5.2 if exact is None else 14)
    _matrix_panels(fig, c, exact, d.connected_correlation_err.sel(**pick).values, correlation_label(axis))
    return fig


def correlation_on_lattice(d, ref=None, axis="Z", origin=0, bonds=None):
    """Connected correlation with site ``origin`` (star) drawn on the lattice with its bonds."""
    pick = {"axis_a": axis, "axis_b": axis, "site_a": origin}
    c = d.connected_correlation.sel(**pick).values.copy()
    err = d.connected_correlation_err.sel(**pick).values
    exact = None if ref is None or "connected_correlation" not in ref else \
        ref.connected_correlation.sel(**pick).values.copy()
    for v in (c, exact):
        if v is not None:
            v[origin] = np.nan
    bonds = nearest_neighbour_bonds(d.x.values, d.y.values) if bonds is None else bonds
    fig = _figure(d, f"connected correlation with site {origin} (star)", 5.4 if exact is None else 15, 4.4)
    label = correlation_label(axis).replace("{b}", "{i}").replace("{a}", f"{{{origin}}}")
    lattice_panels(fig, d, c, exact, err, bonds, label, f"${pauli(axis, str(origin))}{pauli(axis, 'i')}$",
                   mark=origin)
    return fig


def _chain_panels(fig, d, values, err, exact, ylabel):
    """Values against site with error bars (exact dashed); z-scores below when there is a reference."""
    sites = d.site.values
    axes = np.atleast_1d(fig.subplots(1 if exact is None else 2, 1, sharex=True,
                                      height_ratios=None if exact is None else [3, 1.3]))
    ax = axes[0]
    ax.errorbar(sites, values, yerr=err, fmt="o", capsize=3, label="estimate")
    if exact is not None:
        ax.plot(sites, exact, "k--", label="exact")
        z = z_scores(values, err, exact)
        axes[1].axhline(0, color="0.6", lw=1)
        axes[1].plot(sites, z, "o", color="C3")
        axes[1].set_ylim(*(1.15 * np.array(symmetric_limits(z, floor=3.0))))
        axes[1].set_ylabel("$z$")
        axes[1].set_title(Z_LABEL, fontsize=9)
    ax.set_ylabel(ylabel)
    ax.legend(fontsize=8)
    axes[-1].set_xlabel("site $i$")
    for a in axes:
        integer_ticks(a)
    return axes


def energy_density_plot(d, ref=None, bonds=None):
    """Energy density e_i (each term shared among its sites; sum over sites = energy)."""
    e, err = d.energy_density.values, d.energy_density_err.values
    exact = None if ref is None or "energy_density" not in ref else ref.energy_density.values
    if is_chain(d):
        fig = _figure(d, "energy density $e_i$ (each term shared among its sites)", 7.5, 4.2 if exact is None else 5.2)
        _chain_panels(fig, d, e, err, exact, ENERGY_LABEL)
        return fig
    bonds = nearest_neighbour_bonds(d.x.values, d.y.values) if bonds is None else bonds
    fig = _figure(d, "energy density $e_i$ (each term shared among its sites)", 5.4 if exact is None else 15, 4.4)
    lattice_panels(fig, d, e, exact, err, bonds, ENERGY_LABEL, "$e_i$")
    return fig


def magnetization_plot(d, ref=None, axis="Z", bonds=None):
    """One-site expectation values <σ^α_i>."""
    m, err = d.magnetization.sel(axis=axis).values, d.magnetization_err.sel(axis=axis).values
    exact = None if ref is None or "magnetization" not in ref else ref.magnetization.sel(axis=axis).values
    label = rf"$\langle {pauli(axis, 'i')} \rangle$"
    if is_chain(d):
        fig = _figure(d, f"magnetization {label}", 7.5, 4.2 if exact is None else 5.2)
        axes = _chain_panels(fig, d, m, err, exact, label)
        axes[0].set_ylim(-1.1, 1.1)
        return fig
    bonds = nearest_neighbour_bonds(d.x.values, d.y.values) if bonds is None else bonds
    fig = _figure(d, f"magnetization {label}", 5.4 if exact is None else 15, 4.4)
    lattice_panels(fig, d, m, exact, err, bonds, label, label)
    return fig


def renyi_profile(d, ref=None):
    """S2(A) per subsystem label (ordered by size, then as given): two regions of one size stay apart."""
    labels = [str(s) for s in d.subsystem.values]
    size = d.subsystem_size.values
    order = np.argsort(size, kind="stable")
    pos = np.arange(len(order))
    fig = _figure(d, "entanglement profile", max(8.0, 0.55 * len(order) + 2.5), 4.2)
    ax = fig.subplots()
    ax.errorbar(pos, d.renyi2.values[order], yerr=d.renyi2_err.values[order], fmt="o", capsize=3,
                label="estimate")
    if ref is not None and "renyi2" in ref:
        ax.plot(pos, ref.renyi2.values[order], "k_", ms=18, mew=2, label="exact", linestyle="none")
    ax.set_xticks(pos, [f"{labels[i]}\n({size[i]})" for i in order], fontsize=8)
    ax.set_xlabel("subsystem $A$ (number of sites)")
    ax.set_ylabel("Rényi-2 entropy $S_2(A)$ (nats)")
    ax.legend(fontsize=8)
    return fig


def mutual_information_map(d, ref=None):
    """Two-site Rényi-2 mutual information; estimates can fall below 0, so the colour scale is symmetric."""
    mi = d.mutual_information.values
    exact = None if ref is None or "mutual_information" not in ref else ref.mutual_information.values
    err = d.mutual_information_err.values if "mutual_information_err" in d else np.full_like(mi, np.nan)
    fig = _figure(d, "Rényi-2 mutual information $I_2(a{:}b) = S_2(a) + S_2(b) - S_2(ab)$",
                  5.2 if exact is None else 14)
    _matrix_panels(fig, mi, exact, err, "$I_2(a{:}b)$ (nats)")
    return fig


def structure_factor_plot(d, ref=None, axis="Z"):
    """S^αα(q) = (1/n) Σ_ab e^{iq·(r_a - r_b)} <σ^α_a σ^α_b> (with <σ^α_a σ^α_a> = 1) on the reciprocal lattice.

    q is drawn in units of π per lattice spacing (q = π is the zone boundary of a chain or square lattice).
    """
    a = axis.lower()
    formula = (rf"$S^{{{a}{a}}}(\mathbf{{q}}) = (1/n)\,\Sigma_{{ab}}\, e^{{i\mathbf{{q}}\cdot(\mathbf{{r}}_a"
               rf" - \mathbf{{r}}_b)}}\langle {pauli(axis, 'a')} {pauli(axis, 'b')} \rangle$")
    s, err = d.structure_factor.sel(axis=axis).values, d.structure_factor_err.sel(axis=axis).values
    exact = None if ref is None or "structure_factor" not in ref else ref.structure_factor.sel(axis=axis).values
    label = rf"$S^{{{a}{a}}}(\mathbf{{q}})$"
    qx, qy = d.qx.values / np.pi, d.qy.values / np.pi
    if np.allclose(qy, 0):
        fig = _figure(d, f"structure factor {formula}", 7, 4.2)
        ax = fig.subplots()
        ax.errorbar(qx, s, yerr=err, fmt="o", capsize=3, label="estimate")
        if exact is not None:
            ax.plot(qx, exact, "k_", ms=14, mew=2, linestyle="none", label="exact")
        ax.set_xlabel(r"$q/\pi$ ($q$ in 1/lattice spacing)")
        ax.set_ylabel(label)
        ax.legend(fontsize=8)
        return fig
    fig = _figure(d, f"structure factor {formula}", 5.4 if exact is None else 15, 5.0)
    q = xr.Dataset(coords={"x": ("site", qx), "y": ("site", qy)})
    axes = lattice_panels(fig, q, s, exact, err, np.zeros((0, 2), int), label, label,
                          signed=bool(np.nanmin(np.append(s, 0.0)) < 0))
    for ax in axes:
        ax.set_xlabel(r"$q_x/\pi$ ($q$ in 1/lattice spacing)")
        ax.set_ylabel(r"$q_y/\pi$")
        ax.xaxis.set_major_locator(AutoLocator())
        ax.yaxis.set_major_locator(AutoLocator())
    return fig


def _frame_figures(d, r, tag, axis, bonds, out):
    chain = is_chain(d)
    if "connected_correlation" in d:
        out[f"correlation_map{tag}.png"] = correlation_map(d, r, axis)
        if not chain:
            out[f"correlation_on_lattice{tag}.png"] = correlation_on_lattice(d, r, axis, bonds=bonds)
    if "magnetization" in d:
        out[f"magnetization{tag}.png"] = magnetization_plot(d, r, axis, bonds)
    if "energy_density" in d:
        out[f"energy_density{tag}.png"] = energy_density_plot(d, r, bonds)
    if "renyi2" in d and d.sizes.get("subsystem", 0) > 1:
        out[f"renyi2_profile{tag}.png"] = renyi_profile(d, r)
    if "mutual_information" in d:
        out[f"mutual_information{tag}.png"] = mutual_information_map(d, r)
    if "structure_factor" in d:
        out[f"structure_factor{tag}.png"] = structure_factor_plot(d, r, axis)


def figures(results: xr.Dataset, reference: xr.Dataset | None = None, time: float | None = None,
            axis: str = "Z", model=None) -> dict:
    """Every figure the dataset allows, by file name (matplotlib Figure objects, no pyplot state).

    A series gives one set of maps per chosen time (``time``, or up to four
    spread over the series; file names end in _t<time>) and the S2(t) and
    C(t) figures. ``reference`` is matched by time and subsystem label or
    refused (InputError). ``model`` supplies the bonds; without it nearest
    neighbours are the sites at distance 1. ``axis``: "X", "Y" or "Z".
    """
    fr.check_results(results)
    axis = str(axis).upper()[:1]
    if axis not in ("X", "Y", "Z"):
        raise InputError(f"axis {axis!r}: allowed: X, Y, Z (or XX, YY, ZZ)", argument="axis")
    ref = fr.match_reference(results, reference)
    if model is not None and model.lattice.n_sites != results.sizes["site"]:
        raise InputError(f"model: it has {model.lattice.n_sites} sites, the results {results.sizes['site']}",
                         argument="model")
    bonds = nearest_neighbour_bonds(results.x.values, results.y.values, model)
    out = {}
    for index in fr.select_times(results, time):
        d, _, tag = fr.frame(results, index)
        r = None if ref is None else fr.frame(ref, index)[0] if index is not None else ref
        _frame_figures(d, r, tag, axis, bonds, out)
    if "time" in results.dims and results.sizes["time"] > 1:
        curve = fr.full_reference_curve(results, reference)
        if "renyi2" in results:
            out["renyi2_series.png"] = renyi2_series(results, curve)
        if "correlation" in results:
            out["correlation_series.png"] = correlation_series(results, curve, axis, bonds)
    return out


def save_report(figs: dict, results: xr.Dataset, out_dir, reference: xr.Dataset | None = None,
                fmt: str = "png", dpi: int = 150) -> list[str]:
    """Write the figures (atomically, as ``fmt``) and summary.txt into ``out_dir``; returns the written paths."""
    if fmt not in FORMATS:
        raise InputError(f"format {fmt!r}: allowed: {', '.join(FORMATS)}", argument="format")
    if not 20 <= int(dpi) <= 1200:
        raise InputError(f"dpi {dpi}: expected a resolution between 20 and 1200 dots per inch", argument="dpi")
    text = summary_table(results, reference)  # checks the reference before anything is written
    try:
        os.makedirs(out_dir, exist_ok=True)
    except OSError as exc:
        raise InputError(f"{out_dir}: cannot create the report folder ({exc.strerror or type(exc).__name__})",
                         argument="output") from None
    written = []
    for name, fig in figs.items():
        path = os.path.join(out_dir, os.path.splitext(name)[0] + "." + fmt)
        with atomic_path(path, "." + fmt) as tmp:
            fig.savefig(tmp, dpi=int(dpi), format=fmt)
        written.append(path)
    path = os.path.join(out_dir, "summary.txt")
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text + "\n")
    written.append(path)
    return written


def write_report(results: xr.Dataset, out_dir, reference: xr.Dataset | None = None, **options) -> list[str]:
    """All figures that the dataset allows, plus summary.txt; returns the written paths."""
    fmt, dpi = options.pop("fmt", "png"), options.pop("dpi", 150)
    return save_report(figures(results, reference, **options), results, out_dir, reference, fmt, dpi)
