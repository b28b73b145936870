"""Every variable of an :func:`mixsolve.unmix` result, described once.

Each :class:`Output` gives a variable's name, its dimensions, dtype, unit and meaning, and
who makes it. :data:`OUTPUTS` lists them in the order of the result. The kernel
(:func:`mixsolve.solve.block.unmix_block`) returns the arrays of :func:`kernel_outputs` in
that order; ``unmix`` labels them, builds the rest, sets each variable's attributes
(:meth:`Output.attrs`) and documents them all in its docstring (:func:`describe`).
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from mixsolve.flags import VLEN_STR
from mixsolve.library import COMPONENT
from mixsolve.spectra import WAVELENGTH

#: Dimension of the fitted coefficients inside the kernel: components, then baseline terms.
TERM = "term"
#: Dimension of the result's baseline coefficients.
BASELINE_TERM = "baseline_term"
#: Who makes a variable: the kernel for every fit; the kernel for the shift fit only (and
#: the result holds it only then); the model spectra, which the kernel returns for the
#: shift fit (one design per spectrum) and the result otherwise computes when read, from
#: the coefficients (:mod:`mixsolve.solve.model_spectra`); or ``unmix`` itself.
MadeBy = Literal["kernel", "shift kernel", "scatter kernel", "model", "unmix"]

UNCERTAINTY_BASIS = (
    "combined standard uncertainty sqrt(u_noise^2 + u_library^2 + u_stray^2) of independent "
    "inputs: u_noise Type A from the fit residuals, f * s * sqrt(diag((D^T D)^-1)) / "
    "pathlength with s^2 = RSS/(n - p) of each spectrum and f its correlated-noise inflation "
    "(noise_inflation, Newey-West; NaN when n - p = 0); u_library the library's error with "
    "its correlation over wavelengths; u_stray the stated stray-light fraction's "
    "uncertainty; pathlength, dilution, volumetric and wavelength-scale uncertainties are not "
    "included (uncertainty_budget adds them)"
)


@dataclass(frozen=True)
class Output:
    """One variable of an unmix result."""

    name: str
    #: Dimensions after the spectra's own (none: one value per spectrum).
    dims: tuple[str, ...]
    meaning: str
    #: ``attrs["units"]``; ``{unit}`` stands for the result's concentration unit. None: the
    #: variable has no unit attribute (counts, bits, flags, p-values, ratios).
    unit: str | None = None
    dtype: Any = float
    made_by: MadeBy = "kernel"
    #: False: only the kernel returns it (``unmix`` builds result variables from it).
    in_result: bool = True
    #: False: one value for the whole result, not one per spectrum.
    per_spectrum: bool = True
    #: Also record the meaning as ``attrs["meaning"]``.
    meaning_attr: bool = False
    #: Further attributes of the variable, (name, value) pairs.
    extra_attrs: tuple[tuple[str, str], ...] = ()

    def attrs(self, unit: str) -> dict[str, str]:
        """The variable's attributes in a result whose concentration unit is ``unit``."""
        out = {} if self.unit is None else {"units": self.unit.format(unit=unit)}
        if self.meaning_attr:
            out["meaning"] = self.meaning
        return {**out, **dict(self.extra_attrs)}


#: The outputs, in the order of the result (the kernel's in the same order).
OUTPUTS: tuple[Output, ...] = (
    Output("coef", (TERM,), "fitted coefficients: concentration × pathlength of each "
           "component in the library's unit, then the baseline terms (AU, AU/nm)",
           in_result=False),
    Output("concentration", (COMPONENT,), "concentration of each component, c = x/b "
           "(x its fitted coefficient, b the pathlength)", "{unit}"),
    Output("std_uncertainty", (COMPONENT,), "combined standard uncertainty u(c) of every "
           "source the inputs carry, √(u_noise² + u_library² + u_stray²) (attribute "
           "basis)", "{unit}",
           extra_attrs=(("basis", UNCERTAINTY_BASIS),)),
    Output("u_noise", (COMPONENT,), "part of u(c) from the spectrum's own noise: the "
           "standard error from the residual, s·√diag((DᵀD)⁻¹)/b, times noise_inflation "
           "for noise correlated between neighbouring readings", "{unit}"),
    Output("u_library", (COMPONENT,), "part of u(c) from the library's error, correlated "
           "over wavelengths and shared by every spectrum of the run", "{unit}"),
    Output("u_stray", (COMPONENT,), "standard uncertainty from the stated stray-light "
           "fraction's uncertainty, |G·∂A/∂s|·u(s)/b, fully correlated across wavelengths "
           "and shared by all spectra of the call (0 when no fraction is stated; "
           "docs/uncertainty.md, Stray light)", "{unit}"),
    Output("at_zero", (COMPONENT,), "true where NNLS held the component at 0", dtype=bool),
    Output("shift_bias_per_nm", (COMPONENT,), "change of each concentration per +1 nm of "
           "wavelength error, at the fitted composition", "{unit} per nm"),
    Output("rms_residual", (), "root-mean-square residual over the readings used", "AU"),
    Output("noise_inflation", (), "f, the factor by which correlated noise widens u_noise: "
           "Newey–West long-run-variance ratio of the residual, Bartlett window chosen by "
           "Newey–West 1994 (1: independent readings)"),
    Output("scatter_z", (), "with baseline scatter: a/u(a) of the fitted scatter amplitude "
           "(flag scatter above 3.09 in size); otherwise the residual along the λ⁻⁴ shape "
           "orthogonal to the design, vᵀr/(f·s) with v of unit length, s² = RSS/dof and f "
           "the noise inflation (flag unmodelled_scatter above 3.09); NaN with missing "
           "readings or when the design spans the shape"),
    Output("dof", (), "residual degrees of freedom n − p (n − p − 1 with a fitted shift or "
           "scatter exponent)", dtype=np.int64),
    Output("status", (), "bit mask of the status bits of mixsolve.flags", dtype=np.int64),
    Output("absorbance_max", (), "largest measured absorbance over the used wavelengths",
           "AU"),
    Output("absorbance_min", (), "smallest measured absorbance over the used wavelengths",
           "AU"),
    Output("runs_z", (), "runs test z of the residual signs in wavelength order"),
    Output("runs_p", (), "one-sided p of the runs test (too few runs)"),
    Output("residual_lag1", (), "lag-1 autocorrelation of the residual"),
    Output("structure_z", (), "autocorrelation of the residual at lag s + 1 in units of its "
           "standard error for noise correlated over at most s readings, s the readings "
           "within 5 nm (Bartlett 1946); structured_residual above 3.09"),
    Output("lack_of_fit_ratio", (), "√(χ²/E[χ²]) against the noise model and the library's "
           "stated error, E[χ²] = dof + what the library leaves (NaN without a noise model)"),
    Output("lack_of_fit_p", (), "p = P(χ²_dof ≥ χ²·dof/E[χ²]) (NaN without a noise model)"),
    Output("suggested_dilution", (), "dilution factor bringing the peak to sqrt(low*high) AU",
           "1", meaning_attr=True),
    Output("flags", (), "the spectrum's ';'-joined flag codes (docs/flags.md)",
           dtype=VLEN_STR),
    Output("wavelength_shift_nm", (), "fitted wavelength offset δ", "nm",
           made_by="shift kernel"),
    Output("u_wavelength_shift_nm", (), "standard uncertainty u(δ)", "nm",
           made_by="shift kernel"),
    Output("scatter_exponent", (), "fitted Ångström-type exponent n of the scatter term "
           "a·(λ/λ₀)^-n, searched over 0.25-4.5 (λ₀ the shortest used wavelength)",
           made_by="scatter kernel"),
    Output("u_scatter_exponent", (), "standard uncertainty u(n), linearised (NaN when a = 0)",
           made_by="scatter kernel"),
    Output("scatter_amplitude", (), "fitted scatter amplitude a: the scatter term at λ₀ "
           "(attrs scatter_lambda0_nm)", "AU",
           made_by="scatter kernel"),
    Output("u_scatter_amplitude", (), "standard uncertainty u(a), the exponent's "
           "uncertainty included", "AU", made_by="scatter kernel"),
    Output("baseline", (BASELINE_TERM,), "baseline coefficients: offset and slope (about "
           "the mean used wavelength), or offset and scatter amplitude (AU at λ₀)",
           "AU (offset, scatter), AU/nm (slope)", made_by="unmix"),
    Output("fitted", (WAVELENGTH,), "fitted spectrum over the used wavelengths", "AU",
           made_by="model"),
    Output("residual", (WAVELENGTH,), "measured minus fitted spectrum", "AU",
           made_by="model"),
    Output("pathlength_cm", (), "pathlength b: one value, or one per spectrum", "cm",
           made_by="unmix", per_spectrum=False),
    Output("unit_factor", (COMPONENT,), "result unit per library concentration unit",
           made_by="unmix", per_spectrum=False, meaning_attr=True),
)
BY_NAME: dict[str, Output] = {o.name: o for o in OUTPUTS}


def kernel_outputs(shift: bool, scatter: bool = False) -> tuple[Output, ...]:
    """What the kernel returns, in order: for the shift fit (``shift``), the scatter fit
    (``scatter``) or another."""
    made = {"kernel"}
    if shift:
        made |= {"shift kernel", "model"}
    if scatter:
        made |= {"scatter kernel", "model"}
    return tuple(o for o in OUTPUTS if o.made_by in made)


def result_outputs(shift: bool, scatter: bool = False) -> tuple[Output, ...]:
    """The variables of a result, in order: of a shift fit (``shift``), a scatter fit
    (``scatter``) or another."""
    return tuple(o for o in OUTPUTS
                 if o.in_result and (shift or o.made_by != "shift kernel")
                 and (scatter or o.made_by != "scatter kernel"))


def describe(indent: str = "", width: int = 92) -> str:
    """A list of the result's variables, one item each: name, dims, unit and meaning
    (``unit``: the result's concentration unit), wrapped to ``width`` columns."""
    items = []
    for o in OUTPUTS:
        if not o.in_result:
            continue
        dims = ", ".join(("...", *o.dims) if o.per_spectrum else o.dims)
        text = f"- ``{o.name}``" + (f" ({dims})" if dims else "")
        text += "" if o.unit is None else f" [{o.unit.format(unit='unit')}]"
        text += " (with fit_shift)" if o.made_by == "shift kernel" else ""
        text += " (with baseline scatter)" if o.made_by == "scatter kernel" else ""
        items.append(textwrap.fill(f"{text}: {o.meaning}", width, initial_indent=indent,
                                   subsequent_indent=indent + "  "))
    return "\n".join(items)
