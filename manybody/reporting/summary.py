"""summary.txt: every estimate with its error bar, the exact value and the z-score, per time.

z = (estimate - exact) / error. For Gaussian errors about 0.27% of the
z-scores lie beyond 3 in magnitude (normal distribution, a fact of the
trade); the last lines give the largest |z| and that count.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from manybody.reporting import frames as fr

GAUSS_BEYOND_3 = 0.0027  # P(|z| > 3) for a standard normal variable


def _row(name, value, err, exact, rows, zs, where):
    est = f"{value:.5g} +- {err:.2g}" if np.isfinite(err) else f"{value:.5g}"
    if exact is None:
        rows.append(f"  {name:<30}{est:>24}")
        return
    z = (value - exact) / err if np.isfinite(err) and err > 0 else float("nan")
    rows.append(f"  {name:<30}{est:>24}{exact + 0.0:>14.5g}{z:>9.2f}")
    if np.isfinite(z):
        zs.append((abs(z), f"{name.strip()}{where}"))


def _scalar(d, r, name, label, rows, zs, where, scale=1.0):
    if name not in d:
        return
    err = float(d[name + "_err"]) / scale if name + "_err" in d else float("nan")
    exact = None if r is None or name not in r else float(r[name]) / scale
    _row(label, float(d[name]) / scale, err, exact, rows, zs, where)


def _frame_rows(d, r, where, rows, zs, per_site):
    n_sites = d.sizes.get("site", 1)
    _scalar(d, r, "energy", "energy", rows, zs, where)
    _scalar(d, r, "energy", "energy per site", rows, zs, where, scale=n_sites)
    _scalar(d, r, "energy_variance", "energy variance", rows, zs, where)
    if "fidelity" in d:
        target = d.fidelity.attrs.get("target", "")
        _scalar(d, r, "fidelity", "fidelity" + (f" to {target}" if target else ""), rows, zs, where)
    if "total_magnetization" in d:
        for ax in d.axis.values:
            _scalar(d.sel(axis=ax), None if r is None else r.sel(axis=ax), "total_magnetization",
                    f"sum_i <σ{ax.lower()}_i>", rows, zs, where)
    if "observable" in d and "observable_name" in d.dims:
        for k, name in enumerate(d.observable_name.values):
            r_obs = None if r is None or "observable" not in r or name not in r.observable_name.values else \
                r.sel(observable_name=name)
            _scalar(d.isel(observable_name=k), r_obs, "observable", f"<{name}>", rows, zs, where)
    if "renyi2" in d:
        for k, label in enumerate(d.subsystem.values):
            sub, rs = d.isel(subsystem=k), None if r is None else r.isel(subsystem=k)
            _scalar(sub, rs, "renyi2", f"S2({label}) [{int(sub.subsystem_size)} site{'s' * (int(sub.subsystem_size) != 1)}]", rows, zs, where)
    if "magnetization" in d and per_site:
        for ax in d.axis.values:
            for i in d.site.values:
                sel = {"axis": ax, "site": i}
                _scalar(d.sel(**sel), None if r is None else r.sel(**sel), "magnetization",
                        f"<σ{ax.lower()}_{i}>", rows, zs, where)


def _header(results, reference) -> list[str]:
    a = results.attrs
    lines = [(f"results: {a.get('source', '?')}; {fr.describe(results)}; errors: {a.get('error_method', '?')}"
              f" ({a.get('error_blocks', '?')} blocks), one standard error")]
    if reference is not None:
        b = reference.attrs
        what = ", ".join(f"{k} {b[k]}" for k in ("state", "method", "initial_method") if k in b)
        lines.append(f"reference: exact reference{' (' + what + ')' if what else ''}, matched by time and "
                     "subsystem label; z = (estimate - exact)/error")
    lines.append("times in 1/(energy unit of the couplings), hbar = 1; energies in the energy unit of the "
                 "couplings; entropies in nats; σ are Pauli operators")
    head = f"  {'quantity':<30}{'estimate +- error':>24}" + (f"{'exact':>14}{'z':>9}" if reference is not None
                                                             else "")
    return lines + ["", head]


def summary_table(results: xr.Dataset, reference: xr.Dataset | None = None, per_site: bool = True) -> str:
    """Energy, per site, variance, fidelity, observables, S2 of every subsystem, magnetization per site, z-scores.

    The reference is matched by time and subsystem label first (InputError on
    a mismatch), so no line compares values of different times or regions.
    """
    fr.check_results(results)
    ref = fr.match_reference(results, reference)
    rows, zs = _header(results, ref), []
    dim = "time" if "time" in results.dims else "label" if "label" in results.dims else None
    indices = [None] if dim is None else range(results.sizes[dim])
    for index in indices:
        d, title, _ = fr.frame(results, index)
        r = None if ref is None else fr.frame(ref, index)[0] if index is not None else ref
        if title:
            rows.append(title)
        _frame_rows(d, r, f" at {title}" if title else "", rows, zs, per_site)
    if ref is not None and zs:
        worst = max(zs)
        beyond = sum(z > 3 for z, _ in zs)
        rows += ["", (f"largest |z|: {worst[0]:.2f} ({worst[1]}) over {len(zs)} comparisons; |z| > 3: {beyond} "
                      f"(about {GAUSS_BEYOND_3 * len(zs):.2g} expected for Gaussian errors)")]
    return "\n".join(rows)
