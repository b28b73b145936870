"""The uncertainty budget as text: expanded uncertainties and the largest contributors."""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from mixsolve.library import COMPONENT
from mixsolve.report.text import value_with_uncertainty
from mixsolve.spectra import SAMPLE

#: How many contributors are named per result.
TOP = 3


def top_contributors(budget: xr.Dataset, sample: str, component: str, top: int = TOP
                     ) -> list[tuple[str, float]]:
    """The ``top`` sources with the largest share of u_c² (source, share 0–1), largest first."""
    share = budget["share"].sel({SAMPLE: sample, COMPONENT: component})
    pairs = [(str(s), float(v)) for s, v in zip(share["source"].values, share.values,
                                                 strict=True) if np.isfinite(v) and v > 0]
    return sorted(pairs, key=lambda p: -p[1])[:top]


def format_budget(budget: xr.Dataset, top: int = TOP) -> str:
    """Summarise a budget from :func:`mixsolve.uncertainty_budget`.

    Returns
    -------
    str
        Header (coverage factor, measurand, noise basis, wavelength rule, sources not
        stated), one line per sample × component with y ± U, u_c and the ``top``
        largest contributors with their share of u_c², the Monte Carlo comparison when
        present, and numbered notes.
    """
    k = budget.attrs["coverage_factor"]
    unit = budget.attrs["unit"]
    not_stated = json.loads(budget.attrs.get("not_stated", "[]"))
    factor = budget.attrs.get("dilution_factor", 1.0)
    lines = [
        f"Uncertainty budget (JCGM 100:2008): U = k·u_c, k = {k:g}",
        "  measurand     concentration in the measured solution" if factor == 1 else
        f"  measurand     concentration × dilution factor {factor:.6g}",
        f"  noise         {budget.attrs.get('noise_from', '')}",
        f"  wavelength    {budget.attrs.get('wavelength_rule', '')}",
        f"  not stated    {', '.join(not_stated) if not_stated else 'none'}",
        "",
    ]
    samples = [str(s) for s in budget[SAMPLE].values]
    comps = [str(c) for c in budget[COMPONENT].values]
    sw = max(8, *(len(s) for s in samples)) + 2
    cw = max(10, *(len(c) for c in comps)) + 2
    lines.append(f"{'sample':<{sw}}{'component':<{cw}}{f'value ± U ({unit})':<26}"
                 f"{'u_c':>10}  largest shares of u_c²")
    for s in samples:
        for c in comps:
            y = float(budget["value"].sel({SAMPLE: s, COMPONENT: c}))
            u_c = float(budget["combined_uncertainty"].sel({SAMPLE: s, COMPONENT: c}))
            cell = value_with_uncertainty(y, k * u_c)
            shares = ", ".join(f"{name} {100 * v:.0f} %"
                               for name, v in top_contributors(budget, s, c, top))
            u_text = f"{u_c:.3g}" if np.isfinite(u_c) else "n/a"
            lines.append(f"{s:<{sw}}{c:<{cw}}{cell:<26}{u_text:>10}  {shares or '-'}")
    notes = list(json.loads(budget.attrs.get("notes", "[]")))
    if not_stated:
        notes.append(f"not stated, so left out of u_c: {', '.join(not_stated)}; state them "
                     "(docs/uncertainty.md) for a complete budget")
    if "mc_agrees" in budget:
        agrees = budget["mc_agrees"].values
        interval = budget["mc_interval_agrees"].values
        tol = 100 * budget.attrs["mc_tolerance"]
        lines += ["", f"Monte Carlo (JCGM 101:2008), {budget.attrs['mc_draws']} draws, seed "
                  f"{budget.attrs['mc_seed']}: u and mean within {tol:g} % of u_c for "
                  f"{int(agrees.sum())} of {agrees.size}; 95 % interval within {tol:g} % "
                  f"of y ± 1.96·u_c for {int(interval.sum())} of {interval.size}"]
        if not interval.all():
            notes.append("where the Monte Carlo 95 % interval differs from y ± 1.96·u_c the "
                         "output is not normal (rectangular sources dominate): quote the "
                         "Monte Carlo interval (mc_low_95, mc_high_95)")
    lines.append("")
    lines += ["Notes:"] + [f" {i}. {t}." for i, t in enumerate(notes, start=1)] if notes \
        else ["Notes: none."]
    return "\n".join(lines) + "\n"
