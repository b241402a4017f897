"""Figures of a time series: S2(t) as small multiples (one panel per subsystem) and two-point functions C(t).

Times are in units of 1/(energy unit of the couplings) with hbar = 1
(docs/design.md section 2). Exact curves are drawn on the reference's own
time grid, which may be finer than the measured times.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from manybody.reporting import frames as fr
from manybody.reporting.lattice import TIME_LABEL, pauli

MAX_PANELS = 12
MAX_PAIRS = 4


def _chosen(n: int, limit: int) -> np.ndarray:
    """All of 0..n-1 when n <= limit, else ``limit`` indices spread evenly (first and last included)."""
    return np.arange(n) if n <= limit else np.unique(np.round(np.linspace(0, n - 1, limit)).astype(int))


def _figure(ds, what, width, height) -> Figure:
    import textwrap

    width = max(width, 5.0)
    fig = Figure(figsize=(width, height + 0.3), layout="constrained")
    times = ", ".join(f"{t:g}" for t in ds.time.values)
    lines = textwrap.wrap(f"{fr.describe(ds)}; t = {times}", width=int(width * 12))  # about 12 characters per inch
    fig.suptitle("\n".join([what, *lines]), fontsize=10)
    return fig


def renyi2_series(ds, curve=None):
    """S2(A, t) with one panel per subsystem (up to 12, spread over the list), exact curve dashed."""
    t = ds.time.values
    picked = _chosen(ds.sizes["subsystem"], MAX_PANELS)
    cols = min(len(picked), 4)
    rows = -(-len(picked) // cols)
    fig = _figure(ds, "Rényi-2 entropy $S_2(A)$ against time" + (", exact dashed" if curve is not None else ""),
                  3.2 * cols + 0.6, 2.5 * rows + 1.0)
    axes = np.atleast_1d(fig.subplots(rows, cols, sharex=True, sharey=True, squeeze=False)).ravel()
    for ax, k in zip(axes, picked):
        sub = ds.isel(subsystem=k)
        ax.errorbar(t, sub.renyi2.values, yerr=sub.renyi2_err.values, fmt="o", capsize=3, color="C0")
        if curve is not None and "renyi2" in curve:
            ax.plot(curve.time.values, curve.renyi2.isel(subsystem=k).values, "k--", lw=1)
        ax.axhline(0, color="0.8", lw=0.8, zorder=0)
        ax.set_title(f"A = {sub.subsystem.values} ({int(sub.subsystem_size)} site{'s' * (int(sub.subsystem_size) != 1)})", fontsize=9)
    for ax in axes[len(picked):]:
        ax.set_visible(False)
    for ax in axes.reshape(rows, cols)[:, 0]:
        ax.set_ylabel("$S_2(A)$ (nats)")
    for ax in axes.reshape(rows, cols)[-1, :]:
        ax.set_xlabel(TIME_LABEL, fontsize=8)
    return fig


def correlation_series(ds, curve=None, axis="Z", bonds=None):
    """<σ^α_a σ^α_b>(t) for a few nearest-neighbour pairs (spread over the first half of the bonds), legend outside."""
    t = ds.time.values
    bonds = np.asarray(bonds if bonds is not None else [(a, a + 1) for a in range(ds.sizes["site_a"] - 1)])
    half = bonds[: -(-len(bonds) // 2)]  # mirror-symmetric pairs of an open chain would overlap
    pairs = half[_chosen(len(half), MAX_PAIRS)] if len(half) else np.zeros((0, 2), int)
    label = rf"$\langle {pauli(axis, 'a')} {pauli(axis, 'b')} \rangle$"
    fig = _figure(ds, f"nearest-neighbour correlation {label} against time"
                  + (", exact dashed" if curve is not None else ""), 8.5, 4.2)
    ax = fig.subplots()
    pick = {"axis_a": axis, "axis_b": axis}
    for k, (a, b) in enumerate(pairs):
        sel = dict(site_a=int(a), site_b=int(b), **pick)
        ax.errorbar(t, ds.correlation.sel(**sel).values, yerr=ds.correlation_err.sel(**sel).values, fmt="o",
                    capsize=3, color=f"C{k}", label=f"a, b = {a}, {b}")
        if curve is not None and "correlation" in curve:
            ax.plot(curve.time.values, curve.correlation.sel(**sel).values, "--", color=f"C{k}", lw=1)
    ax.set_xlabel(TIME_LABEL)
    ax.set_ylabel(label)
    ax.axhline(0, color="0.8", lw=0.8, zorder=0)
    if len(pairs):
        ax.legend(loc="center left", bbox_to_anchor=(1.02, 0.5), fontsize=8, title="sites")
    return fig
