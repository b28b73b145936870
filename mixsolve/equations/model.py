"""What a set of published fixed-wavelength equations is, and the linear map it implies.

A set gives each result component k as

    cₖ = Σⱼ mₖⱼ · Eⱼ + Σₗ rₖₗ · cₗ,      Eⱼ = A(read, λⱼ) − A(read, λ_ref)

(absorbance terms at the set's wavelengths, the reference reading subtracted first when the
set names a reference wavelength, and optional terms that reuse another component's
result, as carotenoid equations do). In matrix form c = B·E + R·c, so

    c = (I − R)⁻¹ B E = G E,

G (components × readings) the set's effective coefficients. Components whose every term
reuses other results (a total) are *derived*; the others are *primary*. When the primary
components are as many as the readings, G restricted to them is square and its inverse
K = G⁻¹ (readings × components) is the absorptivity matrix the equations imply, per unit
of the result at the set's pathlength (Beer–Lambert, ASTM E169: A = Σ aᵢ b cᵢ).

Core code: no I/O, no printing.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from mixsolve.errors import InputError
from mixsolve.names import name_key
from mixsolve.units import concentration_basis

#: The status of a set whose coefficients were read in the source.
SEEN = "seen"
#: The status of every other set; shown wherever the set is used.
FROM_MEMORY = "from memory — verify against the paper before relying on it"
#: Reads a term may name: one read, or the two reads of an acidification (before/after).
READS = ("", "before", "after")


@dataclass(frozen=True)
class Term:
    """One term of a component's equation.

    Attributes
    ----------
    component : str
        The result this term adds to.
    coefficient : float
        Multiplier (result unit per AU, or per unit of the reused result).
    wavelength_nm : float or None
        The absorbance read at this wavelength (nm); None for a reused result.
    uses : str or None
        The component whose result is reused; None for an absorbance term.
    read : str
        ``""`` (the one read), ``"before"`` or ``"after"`` (acidification).
    u_coefficient : float
        Standard uncertainty of the coefficient, 0 when taken as exact.
    line : int
        Line of the file it came from (0 when built in code), for messages.
    """

    component: str
    coefficient: float
    wavelength_nm: float | None = None
    uses: str | None = None
    read: str = ""
    u_coefficient: float = 0.0
    line: int = 0


@dataclass(frozen=True)
class EquationSet:
    """A checked set of fixed-wavelength equations with its provenance.

    Attributes
    ----------
    name : str
        Short name (``porra1989``).
    terms : tuple of Term
    unit : str
        Concentration unit of the results (``ug/mL``).
    pathlength_cm : float
        The cell the coefficients hold for (cm); results for another cell are scaled by
        pathlength_cm / the cell used.
    citation, status : str
        Full citation; ``"seen"`` or :data:`FROM_MEMORY`.
    reference_nm : float or None
        Wavelength (nm) whose reading is subtracted from every absorbance term first.
    solvent, bandwidth_class, note : str
    bandwidth_nm : float or None
        The bandpass (nm) the coefficients were derived with, when known.
    source : str
        Where the set came from (a file name or ``shipped:<name>``).
    """

    name: str
    terms: tuple[Term, ...]
    unit: str
    pathlength_cm: float = 1.0
    citation: str = ""
    status: str = FROM_MEMORY
    reference_nm: float | None = None
    solvent: str = ""
    bandwidth_class: str = ""
    bandwidth_nm: float | None = None
    note: str = ""
    source: str = ""
    components: tuple[str, ...] = field(init=False)

    def __post_init__(self) -> None:
        check_set(self)
        seen: list[str] = []
        for t in self.terms:
            if t.component not in seen:
                seen.append(t.component)
        object.__setattr__(self, "components", tuple(seen))

    @property
    def readings(self) -> list[tuple[str, float]]:
        """The distinct absorbance terms as (read, wavelength nm), in order of appearance."""
        out: list[tuple[str, float]] = []
        for t in self.terms:
            if t.wavelength_nm is not None and (t.read, t.wavelength_nm) not in out:
                out.append((t.read, t.wavelength_nm))
        return out

    @property
    def reads(self) -> list[str]:
        """The reads the set needs (``[""]``, or ``["before", "after"]``)."""
        return sorted({r for r, _ in self.readings}, key=READS.index)

    @property
    def derived(self) -> list[str]:
        """Components with no absorbance term of their own (totals of other results)."""
        own = {t.component for t in self.terms if t.wavelength_nm is not None}
        return [c for c in self.components if c not in own]

    @property
    def primary(self) -> list[str]:
        """Components with at least one absorbance term."""
        return [c for c in self.components if c not in self.derived]

    @property
    def status_text(self) -> str:
        """The set's name, citation and status in one line, for every output that used it."""
        return f"{self.name}: {self.citation} [status: {self.status}]"


def check_set(eq: EquationSet) -> None:
    """Refuse a set that cannot be evaluated, naming the term and the fix.

    Raises
    ------
    InputError
        Empty set; a term with both or neither of a wavelength and a reused component; a
        non-finite coefficient or u; a wavelength outside 100-3000 nm; an unknown read;
        a reused component that has no equation or reuses itself (directly or round a
        cycle); two spellings of one component; a mix of one read and before/after reads;
        a pathlength that is not positive; a unit that is not a concentration.
    """
    where = eq.source or eq.name or "equations"
    if not eq.terms:
        raise InputError(f"{where}: no terms; give at least one component's equation")
    concentration_basis(eq.unit, f"{where}: unit")
    if not (math.isfinite(eq.pathlength_cm) and eq.pathlength_cm > 0):
        raise InputError(f"{where}: pathlength_cm {eq.pathlength_cm:g} is not a positive "
                         "number of cm; give the cell the coefficients hold for (usually 1)")
    if eq.reference_nm is not None and not (100 <= eq.reference_nm <= 3000):
        raise InputError(f"{where}: reference_nm {eq.reference_nm:g} is outside 100-3000 nm")
    keys: dict[str, str] = {}
    for t in eq.terms:
        at = f"{where}, line {t.line}" if t.line else f"{where}, component {t.component!r}"
        key = name_key(t.component)
        if not key:
            raise InputError(f"{at}: empty component name; name the result of this term")
        if keys.setdefault(key, t.component) != t.component:
            raise InputError(f"{at}: component {t.component!r} is spelled "
                             f"{keys[key]!r} elsewhere; use one spelling")
        if (t.wavelength_nm is None) == (t.uses is None):
            raise InputError(f"{at}: give either wavelength_nm or uses, not "
                             f"{'both' if t.uses is not None else 'neither'}")
        if not math.isfinite(t.coefficient):
            raise InputError(f"{at}: coefficient {t.coefficient!r} is not a finite number")
        if not (math.isfinite(t.u_coefficient) and t.u_coefficient >= 0):
            raise InputError(f"{at}: u_coefficient {t.u_coefficient!r} must be 0 or more")
        if t.wavelength_nm is not None and not (100 <= t.wavelength_nm <= 3000):
            raise InputError(f"{at}: wavelength_nm {t.wavelength_nm:g} is outside "
                             "100-3000 nm; give the wavelength in nm")
        if t.read not in READS:
            raise InputError(f"{at}: read {t.read!r} is not one of before, after (or empty)")
    names = {t.component for t in eq.terms}
    for t in eq.terms:
        if t.uses is not None and t.uses not in names:
            raise InputError(f"{where}, line {t.line}: uses {t.uses!r}, which has no "
                             f"equation here; components are {', '.join(sorted(names))}")
    reads = {t.read for t in eq.terms if t.wavelength_nm is not None}
    if "" in reads and len(reads) > 1:
        raise InputError(f"{where}: some terms name a read (before/after) and some do not; "
                         "name the read of every absorbance term of an acidification set")
    _order(eq.terms)


def _order(terms: Sequence[Term]) -> list[str]:
    """Components in an order where every reused result comes first (refuses a cycle)."""
    needs: dict[str, set[str]] = {}
    for t in terms:
        needs.setdefault(t.component, set())
        if t.uses is not None:
            needs[t.component].add(t.uses)
    done: list[str] = []
    while len(done) < len(needs):
        ready = [c for c, n in needs.items() if c not in done and n <= set(done)]
        if not ready:
            stuck = sorted(c for c in needs if c not in done)
            raise InputError(f"equations: components {', '.join(stuck)} reuse each other's "
                             "results in a cycle; each may reuse only results given without it")
        done.extend(ready)
    return done


@dataclass(frozen=True)
class LinearMap:
    """The linear map of a set: results from the readings, and its parts.

    Attributes
    ----------
    components : list of str
        Every component (primary and derived), in the set's order.
    readings : list of (str, float)
        The absorbance terms (read, nm) E is made of.
    b, r : ndarray
        B (components × readings) and R (components × components) of the module notes.
    solve : ndarray
        (I − R)⁻¹, components × components.
    g : ndarray
        G = (I − R)⁻¹ B, components × readings (result per AU of each E term).
    u_b, u_r : ndarray
        Standard uncertainties of B's and R's entries (0: exact).
    """

    components: list[str]
    readings: list[tuple[str, float]]
    b: np.ndarray
    r: np.ndarray
    solve: np.ndarray
    g: np.ndarray
    u_b: np.ndarray
    u_r: np.ndarray


def linear_map(eq: EquationSet) -> LinearMap:
    """B, R, (I − R)⁻¹ and G = (I − R)⁻¹B of a set (see the module notes)."""
    comps = list(eq.components)
    reads = eq.readings
    n, m = len(comps), len(reads)
    b, r = np.zeros((n, m)), np.zeros((n, n))
    u_b, u_r = np.zeros((n, m)), np.zeros((n, n))
    for t in eq.terms:
        k = comps.index(t.component)
        if t.wavelength_nm is not None:
            j = reads.index((t.read, t.wavelength_nm))
            b[k, j] += t.coefficient
            u_b[k, j] = math.hypot(u_b[k, j], t.u_coefficient)
        else:
            assert t.uses is not None
            j = comps.index(t.uses)
            r[k, j] += t.coefficient
            u_r[k, j] = math.hypot(u_r[k, j], t.u_coefficient)
    solve = np.linalg.inv(np.eye(n) - r)  # R is nilpotent (no cycle): always invertible
    return LinearMap(comps, reads, b, r, solve, solve @ b, u_b, u_r)


def implied_absorptivity(eq: EquationSet) -> np.ndarray:
    """K = G⁻¹ over the primary components: AU per (result unit · cm), readings × components.

    Raises
    ------
    InputError
        When the primary components are not as many as the readings, or G is singular:
        such equations imply no unique absorptivities.

    Notes
    -----
    K is per cm: G⁻¹ divided by the set's pathlength. Multiplying by the factor from the
    result unit to g/L (or mol/L) gives L/(g·cm) (or L/(mol·cm)) after inversion:
    K[AU/((g/L)·cm)] = K[AU/(unit·cm)] / f, f = (g/L) per unit.
    """
    lm = linear_map(eq)
    rows = [lm.components.index(c) for c in eq.primary]
    g = lm.g[rows]
    if g.shape[0] != g.shape[1]:
        raise InputError(f"{eq.name}: {g.shape[0]} components with absorbance terms but "
                         f"{g.shape[1]} readings; implied absorptivities need as many of each")
    if np.linalg.matrix_rank(g) < g.shape[0]:
        raise InputError(f"{eq.name}: the coefficient matrix is singular; the equations "
                         "imply no absorptivities")
    return np.linalg.inv(g) / eq.pathlength_cm


def absorptivity_unit(eq: EquationSet) -> tuple[str, float]:
    """The canonical absorptivity unit of a set's results and the factor to it.

    Returns
    -------
    unit : str
        ``"L/(g*cm)"`` for mass concentrations, ``"L/(mol*cm)"`` for amounts.
    factor : float
        Multiply :func:`implied_absorptivity` by this to get ``unit`` (1/f, f the factor
        from the result unit to g/L or mol/L).
    """
    basis, f = concentration_basis(eq.unit, f"{eq.name}: unit")
    return ("L/(g*cm)" if basis == "mass" else "L/(mol*cm)"), 1.0 / f


def reading_label(reading: tuple[str, float]) -> str:
    """``"663.6 nm"`` or ``"664 nm (before)"``."""
    read, nm = reading
    return f"{nm:g} nm" + (f" ({read})" if read else "")
