"""Drawing helpers: the lattice with its bonds, symmetric colour limits, integer ticks, labels in Pauli units.

Colour maps are readable in print and by colour-blind readers: viridis for
sequential quantities, PuOr (a diverging map without red-green contrast) for
signed ones, always with limits symmetric around zero so that white means 0.
"""

from __future__ import annotations

import numpy as np
from matplotlib.collections import LineCollection
from matplotlib.ticker import MaxNLocator

SEQUENTIAL = "viridis"
DIVERGING = "PuOr_r"
TIME_LABEL = r"time $t$ (1/energy unit of the couplings, $\hbar = 1$)"
Z_LABEL = r"$z$ = (estimate $-$ exact) / error"
SPACING = "lattice spacings"


def pauli(axis: str, site: str) -> str:
    """Mathtext for sigma^alpha_site, e.g. pauli("Z", "a") -> \\sigma^z_a."""
    return rf"\sigma^{axis.lower()}_{{{site}}}"


def correlation_label(axis: str, connected: bool = True) -> str:
    pair = rf"\langle {pauli(axis, 'a')} {pauli(axis, 'b')} \rangle"
    if not connected:
        return f"${pair}$"
    return rf"${pair} - \langle {pauli(axis, 'a')} \rangle\langle {pauli(axis, 'b')} \rangle$"


def symmetric_limits(*arrays, floor: float = 0.0) -> tuple[float, float]:
    """(-m, m) with m the largest finite |value| of all arrays (at least ``floor``; 1 when there is none)."""
    values = np.concatenate([np.ravel(np.asarray(a, dtype=float)) for a in arrays if a is not None])
    finite = values[np.isfinite(values)]
    top = max(float(np.max(np.abs(finite))) if finite.size else 0.0, floor)
    top = top or 1.0
    return -top, top


def z_scores(estimate, error, exact) -> np.ndarray:
    """(estimate - exact) / error; NaN where the error is zero or missing."""
    estimate, error, exact = (np.asarray(a, dtype=float) for a in (estimate, error, exact))
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (estimate - exact) / error
    return np.where(np.isfinite(error) & (error > 0), z, np.nan)


def integer_ticks(ax, x: bool = True, y: bool = False) -> None:
    if x:
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    if y:
        ax.yaxis.set_major_locator(MaxNLocator(integer=True))


def is_chain(ds) -> bool:
    return "y" not in ds.coords or np.allclose(ds.y.values, ds.y.values[0])


def nearest_neighbour_bonds(x, y, model=None) -> np.ndarray:
    """Bonds (pairs a < b) of the model's lattice when given, else the site pairs at distance 1.

    Positions are in lattice spacings (docs/formats.md, coordinates x, y), so
    nearest neighbours of square, triangular and chain lattices sit at
    distance 1; wrap-around bonds of periodic lattices are not drawn.
    """
    pos = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    if model is not None:
        bonds = np.sort(np.asarray(model.lattice.bonds, dtype=int).reshape(-1, 2), axis=1)
        length = np.linalg.norm(pos[bonds[:, 0]] - pos[bonds[:, 1]], axis=1)
        return bonds[length < 1.5]  # wrap-around bonds of periodic lattices would cross the picture
    dist = np.linalg.norm(pos[:, None, :] - pos[None, :, :], axis=-1)
    a, b = np.nonzero(np.triu(np.abs(dist - 1.0) < 1e-6, k=1))
    return np.column_stack([a, b])


def draw_lattice(ax, x, y, values, bonds, vmin, vmax, cmap=DIVERGING, mark=None):
    """Bonds as grey lines, sites as discs coloured by ``values`` (NaN hollow); returns the scatter for a colour bar."""
    x, y, values = np.asarray(x, float), np.asarray(y, float), np.asarray(values, float)
    if len(bonds):
        segments = np.stack([np.column_stack([x[bonds[:, 0]], y[bonds[:, 0]]]),
                             np.column_stack([x[bonds[:, 1]], y[bonds[:, 1]]])], axis=1)
        ax.add_collection(LineCollection(segments, colors="0.6", linewidths=2, zorder=1))
    size = float(np.clip(3600 / max(len(x), 1), 40, 420))
    nan = ~np.isfinite(values)
    sc = ax.scatter(x[~nan], y[~nan], c=values[~nan], cmap=cmap, vmin=vmin, vmax=vmax, s=size,
                    edgecolors="k", zorder=2)
    if nan.any():
        ax.scatter(x[nan], y[nan], s=size, facecolors="white", edgecolors="k", zorder=2)
    if mark is not None:
        ax.scatter([x[mark]], [y[mark]], marker="*", s=size * 0.8, c="k", zorder=3)
    ax.set_xlabel(f"x ({SPACING})")
    ax.set_ylabel(f"y ({SPACING})")
    ax.set_aspect("equal")
    ax.margins(0.15)
    for axis, v in ((ax.xaxis, x), (ax.yaxis, y)):
        lo, hi = np.floor(v.min()), np.ceil(v.max())
        if hi - lo <= 12:
            axis.set_ticks(np.arange(lo, hi + 1).astype(int))
        else:
            axis.set_major_locator(MaxNLocator(integer=True))
    return sc


def lattice_panels(fig, d, values, exact, error, bonds, label, title, mark=None, cmap=DIVERGING, signed=True):
    """Estimate, exact and z-score maps side by side on the lattice (estimate only without a reference)."""
    n_panels = 1 if exact is None else 3
    axes = np.atleast_1d(fig.subplots(1, n_panels))
    if signed:
        vmin, vmax = symmetric_limits(values, exact)
    else:
        vmin, vmax, cmap = 0.0, symmetric_limits(values, exact)[1], SEQUENTIAL
    panels = [("estimate", values, vmin, vmax, cmap, label)]
    if exact is not None:
        panels.append(("exact", exact, vmin, vmax, cmap, label))
        z = z_scores(values, error, exact)
        zmin, zmax = symmetric_limits(z, floor=3.0)
        panels.append(("z-score", z, zmin, zmax, DIVERGING, Z_LABEL))
    for ax, (name, v, lo, hi, cm, lab) in zip(axes, panels):
        sc = draw_lattice(ax, d.x.values, d.y.values, v, bonds, lo, hi, cm, mark)
        ax.set_title(f"{title}: {name}" if n_panels > 1 else title, fontsize=10)
        fig.colorbar(sc, ax=ax, label=lab, shrink=0.85)
    return axes
