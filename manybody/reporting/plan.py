"""The depth trade-off as a picture: the error each quantity would get, against circuit depth."""

from __future__ import annotations

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

COLUMNS = {"energy": "energy", "energy_density": "energy per site (worst site)", "correlation": "correlations",
           "purity": "purities", "observable": "observables (worst)", "fidelity": "fidelity"}


def plan_figure(ds: xr.Dataset, snapshots: float | None = None) -> Figure:
    """Predicted one-sigma error of each planned quantity at every depth, for one number of snapshots.

    A column needing N_q(d) snapshots for the error eps has, with N snapshots,
    the error eps sqrt(N_q(d) / N) (errors fall as 1/sqrt(N)); N defaults to
    what the recommended depth needs. Local terms get worse with depth; long
    strings, large purities and fidelities get better.
    """
    eps = float(ds.attrs["error"])
    depths = ds.depth.values
    best = int(ds.attrs.get("recommended_depth", depths[0]))
    if snapshots is None:
        snapshots = float(ds.snapshots.sel(depth=best)) if best in depths else float(ds.snapshots.min())
    fig = Figure(figsize=(6, 4), layout="constrained")
    ax = fig.subplots()
    for name, label in COLUMNS.items():
        if name not in ds or not np.any(ds[name].values > 0):
            continue
        need = np.where(ds[name].values > 0, ds[name].values, np.nan)
        ax.plot(depths, eps * np.sqrt(need / snapshots), "o-", label=label)
    ax.set_yscale("log")
    ax.set_xticks(depths)
    ax.set_xlabel("circuit depth (0: random local bases)")
    ax.set_ylabel(f"predicted one-sigma error with {snapshots:,.0f} snapshots")
    ax.axhline(eps, color="0.6", lw=0.8, ls="--")
    fig.suptitle(f"depth trade-off ({ds.attrs.get('method', 'worst case')} variances)\n"
                 f"dashed: the target error {eps:g}", fontsize=10)
    ax.legend(fontsize=8, loc="center left", bbox_to_anchor=(1.02, 0.5))
    return fig
