"""Reports: PNG figures a group puts on a slide, and a plain-text summary table.

Colour maps are readable in print and by colour-blind readers: viridis for
sequential quantities, PuOr (a diverging map without red-green contrast) for
signed ones. Every axis carries a label, with units where there are any.
Each figure function returns its matplotlib Figure, so tests can read the
labels back.
"""

from __future__ import annotations

import os

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from manybody.io.files import atomic_path

SEQUENTIAL = "viridis"
DIVERGING = "PuOr_r"


def _last(ds: xr.Dataset) -> xr.Dataset:
    for dim in ("time", "label"):
        if dim in ds.dims:
            return ds.isel({dim: -1})
    return ds


def _is_chain(ds) -> bool:
    return "y" in ds.coords and np.allclose(ds.y.values, ds.y.values[0])


def _symmetric_limits(values):
    finite = np.asarray(values)[np.isfinite(values)]
    top = float(np.max(np.abs(finite))) if finite.size else 1.0
    return -top or -1.0, top or 1.0


def correlation_map(ds, axis="Z"):
    d = _last(ds)
    c = d.connected_correlation.sel(axis_a=axis, axis_b=axis).values
    fig = Figure(figsize=(5, 4.2))
    ax = fig.subplots()
    lo, hi = _symmetric_limits(c)
    im = ax.imshow(c, cmap=DIVERGING, vmin=lo, vmax=hi, origin="lower")
    ax.set_xlabel("site b")
    ax.set_ylabel("site a")
    ax.set_title(f"connected correlation {axis}{axis}")
    fig.colorbar(im, ax=ax, label=f"<s{axis.lower()}_a s{axis.lower()}_b> - <s{axis.lower()}_a><s{axis.lower()}_b>")
    fig.tight_layout()
    return fig


def correlation_on_lattice(ds, axis="Z", origin=0):
    d = _last(ds)
    c = d.connected_correlation.sel(axis_a=axis, axis_b=axis, site_a=origin).values.copy()
    c[origin] = np.nan
    fig = Figure(figsize=(5, 4.2))
    ax = fig.subplots()
    lo, hi = _symmetric_limits(c)
    sc = ax.scatter(d.x.values, d.y.values, c=c, cmap=DIVERGING, vmin=lo, vmax=hi, s=260, edgecolors="k")
    ax.scatter([d.x.values[origin]], [d.y.values[origin]], marker="*", s=300, c="k", label=f"site {origin}")
    ax.set_xlabel("x (lattice spacings)")
    ax.set_ylabel("y (lattice spacings)")
    ax.set_aspect("equal")
    ax.margins(0.2)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.15), fontsize=8)
    ax.set_title(f"connected {axis}{axis} correlation with site {origin}")
    fig.colorbar(sc, ax=ax, label="connected correlation")
    fig.tight_layout()
    return fig


def energy_density_plot(ds, ref=None):
    d = _last(ds)
    fig = Figure(figsize=(5.5, 3.8))
    ax = fig.subplots()
    if _is_chain(d):
        ax.errorbar(d.site.values, d.energy_density.values, yerr=d.energy_density_err.values, fmt="o", capsize=3,
                    label="estimate")
        if ref is not None and "energy_density" in ref:
            ax.plot(ref.site.values, _last(ref).energy_density.values, "k--", label="exact")
        ax.set_xlabel("site")
        ax.set_ylabel("energy density (energy unit of the couplings)")
        ax.legend()
    else:
        sc = ax.scatter(d.x.values, d.y.values, c=d.energy_density.values, cmap=SEQUENTIAL, s=260, edgecolors="k")
        ax.set_xlabel("x (lattice spacings)")
        ax.set_ylabel("y (lattice spacings)")
        ax.set_aspect("equal")
        ax.margins(0.2)
        fig.colorbar(sc, ax=ax, label="energy density (energy unit of the couplings)")
    ax.set_title("energy density")
    fig.tight_layout()
    return fig


def renyi_profile(ds, ref=None):
    d = _last(ds)
    size = d.subsystem_size.values
    order = np.argsort(size, kind="stable")
    fig = Figure(figsize=(5.5, 3.8))
    ax = fig.subplots()
    ax.errorbar(size[order], d.renyi2.values[order], yerr=d.renyi2_err.values[order], fmt="o", capsize=3,
                label="estimate")
    if ref is not None and "renyi2" in ref:
        r = _last(ref)
        ax.plot(r.subsystem_size.values[order], r.renyi2.values[order], "k--", label="exact")
    ax.set_xlabel("subsystem size (sites)")
    ax.set_ylabel("Renyi-2 entropy S2 (nats)")
    ax.set_title("entanglement profile")
    ax.legend()
    fig.tight_layout()
    return fig


def series_plot(ds, ref=None):
    """S2(t) of every subsystem and nearest-neighbour ZZ correlations versus time."""
    t = ds.time.values
    fig = Figure(figsize=(10, 3.8))
    axes = fig.subplots(1, 2)
    ax = axes[0]
    if "renyi2" in ds:
        for label in ds.subsystem.values:
            sel = ds.sel(subsystem=label)
            line = ax.errorbar(t, sel.renyi2.values, yerr=sel.renyi2_err.values, fmt="o", capsize=3,
                               label=f"A = {label}")
            if ref is not None and "renyi2" in ref:
                ax.plot(ref.time.values, ref.sel(subsystem=label).renyi2.values, "--",
                        color=line.lines[0].get_color())
    ax.set_xlabel("time (1/energy unit of the couplings, hbar = 1)")
    ax.set_ylabel("Renyi-2 entropy S2 (nats)")
    ax.set_title("entanglement growth (dashed: exact)")
    if "renyi2" in ds:
        ax.legend(fontsize=8)
    ax = axes[1]
    if "correlation" in ds:
        n = ds.sizes["site_a"]
        for a in sorted({0, max(n // 2 - 1, 0)}):
            c = ds.correlation.sel(axis_a="Z", axis_b="Z", site_a=a, site_b=a + 1)
            e = ds.correlation_err.sel(axis_a="Z", axis_b="Z", site_a=a, site_b=a + 1)
            line = ax.errorbar(t, c.values, yerr=e.values, fmt="o", capsize=3, label=f"sites {a},{a + 1}")
            if ref is not None and "correlation" in ref:
                ax.plot(ref.time.values, ref.correlation.sel(axis_a="Z", axis_b="Z", site_a=a, site_b=a + 1).values,
                        "--", color=line.lines[0].get_color())
        ax.legend(fontsize=8)
    ax.set_xlabel("time (1/energy unit of the couplings, hbar = 1)")
    ax.set_ylabel("<sz_a sz_a+1>")
    ax.set_title("nearest-neighbour ZZ correlation")
    fig.tight_layout()
    return fig


def mutual_information_map(ds):
    d = _last(ds)
    fig = Figure(figsize=(5, 4.2))
    ax = fig.subplots()
    im = ax.imshow(d.mutual_information.values, cmap=SEQUENTIAL, origin="lower")
    ax.set_xlabel("site b")
    ax.set_ylabel("site a")
    ax.set_title("Renyi-2 mutual information I2(a:b)")
    fig.colorbar(im, ax=ax, label="I2 (nats)")
    fig.tight_layout()
    return fig


def _value(ds, name, digits=5):
    if name not in ds:
        return "-"
    v, e = float(ds[name]), float(ds[name + "_err"]) if name + "_err" in ds else float("nan")
    return f"{v:.{digits}g} +- {e:.2g}" if np.isfinite(e) else f"{v:.{digits}g}"


def summary_table(ds, ref=None) -> str:
    """Energy, energy per site, variance, S2 of the largest subsystem, with error bars (and exact values)."""
    rows = []
    frames = ([(f"t = {t:g}", ds.sel(time=t), None if ref is None else ref.sel(time=t, method="nearest"))
               for t in ds.time.values] if "time" in ds.dims else [("", ds, ref)])
    n_sites = ds.sizes.get("site", 1)
    for title, d, r in frames:
        if title:
            rows.append(title)
        lines = []
        if "energy" in d:
            lines.append(("energy", _value(d, "energy"), None if r is None else float(r.energy)))
            per_site = d.energy / n_sites
            per_err = d.energy_err / n_sites
            lines.append(("energy per site", f"{float(per_site):.5g} +- {float(per_err):.2g}",
                          None if r is None else float(r.energy) / n_sites))
        if "energy_variance" in d:
            lines.append(("energy variance", _value(d, "energy_variance"),
                          None if r is None or "energy_variance" not in r else float(r.energy_variance)))
        if "renyi2" in d:
            big = int(np.argmax(d.subsystem_size.values))
            sub = d.isel(subsystem=big)
            lines.append((f"S2 of {str(sub.subsystem.values)} (nats)",
                          f"{float(sub.renyi2):.4g} +- {float(sub.renyi2_err):.2g}",
                          None if r is None or "renyi2" not in r else float(r.isel(subsystem=big).renyi2)))
        for name, value, exact in lines:
            if exact is None:
                rows.append(f"  {name:<28}{value:>26}")
            else:
                rows.append(f"  {name:<28}{value:>26}   exact {exact + 0.0:.5g}")
    return "\n".join(rows)


def figures(results: xr.Dataset, reference: xr.Dataset | None = None) -> dict:
    """Every figure the dataset allows, by file name (matplotlib Figure objects, no pyplot state)."""
    out = {}
    if "connected_correlation" in results:
        out["correlation_map.png"] = correlation_map(results)
        if not _is_chain(results):
            out["correlation_on_lattice.png"] = correlation_on_lattice(results)
    if "energy_density" in results:
        out["energy_density.png"] = energy_density_plot(results, reference)
    if "renyi2" in results and results.sizes.get("subsystem", 0) > 1:
        out["renyi2_profile.png"] = renyi_profile(results, reference)
    if "time" in results.dims:
        out["series.png"] = series_plot(results, reference)
    if "mutual_information" in results:
        out["mutual_information.png"] = mutual_information_map(results)
    return out


def save_report(figs: dict, results: xr.Dataset, out_dir, reference: xr.Dataset | None = None) -> list[str]:
    """Write the figures (PNG, atomically) and summary.txt into ``out_dir``; returns the written paths."""
    os.makedirs(out_dir, exist_ok=True)
    written = []
    for name, fig in figs.items():
        path = os.path.join(out_dir, name)
        with atomic_path(path, ".png") as tmp:
            fig.savefig(tmp, dpi=120, format="png")
        written.append(path)
    path = os.path.join(out_dir, "summary.txt")
    with atomic_path(path) as tmp:
        with open(tmp, "w") as fh:
            fh.write(summary_table(results, reference) + "\n")
    written.append(path)
    return written


def write_report(results: xr.Dataset, out_dir, reference: xr.Dataset | None = None) -> list[str]:
    """All figures that the dataset allows, plus summary.txt; returns the written paths."""
    return save_report(figures(results, reference), results, out_dir, reference)
