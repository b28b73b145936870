"""Dilutions and the tolerances of volumetric ware, as standard uncertainties.

A dilution is a chain of volumes: aliquots taken (pipettes) and volumes made up to
(flasks). Its factor is F = Π V_final / Π V_aliquot, and, the volumes being independent,
its relative standard uncertainty is u(F)/F = √Σ (u(Vᵢ)/Vᵢ)² (JCGM 100:2008, 5.1.6).

A tolerance ±a (maximum permissible error) becomes a standard uncertainty a/√3 for a
rectangular distribution (JCGM 100:2008, 4.3.7) or a/√6 for a triangular one (4.3.9);
a random error stated as a standard deviation (ISO 8655) adds in quadrature.

The class values in :data:`VOLUMETRIC_CLASSES` are **from memory** of ISO 648 (one-mark
glass pipettes), ISO 1042 (one-mark volumetric flasks) and ISO 8655-2 (piston pipettes),
not read from the standards: check them against your ware's certificate or the standard.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Literal

from mixsolve.errors import InputError
from mixsolve.spectra import check_number

Role = Literal["aliquot", "final"]
Distribution = Literal["rectangular", "triangular"]
DIVISORS: dict[str, float] = {"rectangular": math.sqrt(3.0), "triangular": math.sqrt(6.0)}

#: Tolerances of one-mark glassware: nominal volume (mL) → ± maximum error (mL).
#: **From memory** (ISO 648 pipettes, ISO 1042 flasks); class B is twice class A.
_PIPETTE_A = {1.0: 0.008, 2.0: 0.010, 5.0: 0.015, 10.0: 0.020, 20.0: 0.030, 25.0: 0.030,
              50.0: 0.050, 100.0: 0.080}
_FLASK_A = {5.0: 0.025, 10.0: 0.025, 20.0: 0.040, 25.0: 0.040, 50.0: 0.060, 100.0: 0.10,
            200.0: 0.15, 250.0: 0.15, 500.0: 0.25, 1000.0: 0.40, 2000.0: 0.60}
#: Piston pipettes (ISO 8655-2, **from memory**): nominal volume (mL) → (maximum
#: systematic error, random error as a standard deviation), both as fractions of nominal.
_PISTON = {0.01: (0.012, 0.008), 0.02: (0.010, 0.005), 0.1: (0.008, 0.003),
           0.2: (0.008, 0.003), 1.0: (0.008, 0.003), 5.0: (0.008, 0.003),
           10.0: (0.006, 0.003)}

#: Device name → (description, kind). ``glass``: exact nominal volumes only;
#: ``piston``: the smallest nominal at or above the volume, errors of that nominal.
VOLUMETRIC_CLASSES: dict[str, tuple[str, dict[float, object]]] = {
    "pipette-A": ("one-mark glass pipette, class A (ISO 648, from memory)", _PIPETTE_A),
    "pipette-B": ("one-mark glass pipette, class B (ISO 648, from memory)",
                  {v: 2 * t for v, t in _PIPETTE_A.items()}),
    "flask-A": ("one-mark volumetric flask, class A (ISO 1042, from memory)", _FLASK_A),
    "flask-B": ("one-mark volumetric flask, class B (ISO 1042, from memory)",
                {v: 2 * t for v, t in _FLASK_A.items()}),
    "piston": ("piston pipette at nominal volume (ISO 8655-2, from memory)", _PISTON),
}
#: Device assumed when a dilution step names none.
DEFAULT_DEVICE: dict[str, str] = {"aliquot": "pipette-A", "final": "flask-A"}


@dataclass(frozen=True)
class VolumeStep:
    """One volume of a dilution.

    Parameters
    ----------
    volume_ml : float
        Nominal volume (mL).
    role : {"aliquot", "final"}
        ``aliquot``: a volume taken (it divides the factor); ``final``: a volume made up
        to (it multiplies the factor).
    tolerance_ml : float
        ± maximum permissible (systematic) error (mL), the half-width of ``distribution``.
    random_sd_ml : float
        Random error as a standard deviation (mL), e.g. a piston pipette's repeatability.
    distribution : {"rectangular", "triangular"}
        Distribution assumed within ±``tolerance_ml``.
    device : str
        Label of the ware (a :data:`VOLUMETRIC_CLASSES` key, or ``"user"``).
    """

    volume_ml: float
    role: Role
    tolerance_ml: float
    random_sd_ml: float = 0.0
    distribution: Distribution = "rectangular"
    device: str = "user"

    def __post_init__(self) -> None:
        check_number(self.volume_ml, "dilution, volume", "mL", positive=True)
        for name in ("tolerance_ml", "random_sd_ml"):
            check_number(getattr(self, name), f"dilution, {name} of the {self.volume_ml:g} mL "
                         "volume", "mL", low=0)
        if self.role not in ("aliquot", "final"):
            raise InputError(f"dilution: role {self.role!r} is not 'aliquot' or 'final'")
        if self.distribution not in DIVISORS:
            raise InputError(f"dilution: distribution {self.distribution!r} is not one of "
                             f"{', '.join(DIVISORS)}")

    @property
    def standard_uncertainty_ml(self) -> float:
        """u(V) = √((a/d)² + s²) in mL, d = √3 (rectangular) or √6 (triangular)."""
        return math.hypot(self.tolerance_ml / DIVISORS[self.distribution], self.random_sd_ml)

    @property
    def relative_uncertainty(self) -> float:
        """u(V)/V (dimensionless)."""
        return self.standard_uncertainty_ml / self.volume_ml


@dataclass(frozen=True)
class Dilution:
    """A chain of volumes; factor F = Π V_final / Π V_aliquot (dimensionless).

    The measurand of a budget with a dilution is the concentration of the undiluted
    sample: F × the concentration found in the measured solution.
    """

    steps: tuple[VolumeStep, ...]

    def __post_init__(self) -> None:
        if not self.steps:
            raise InputError("dilution: no volumes given")

    @property
    def factor(self) -> float:
        """F = Π V_final / Π V_aliquot."""
        num = math.prod(s.volume_ml for s in self.steps if s.role == "final")
        den = math.prod(s.volume_ml for s in self.steps if s.role == "aliquot")
        return num / den

    @property
    def relative_uncertainty(self) -> float:
        """u(F)/F = √Σ (u(Vᵢ)/Vᵢ)² (independent volumes)."""
        return math.sqrt(sum(s.relative_uncertainty**2 for s in self.steps))

    def describe(self) -> str:
        """One line: every volume with its device and standard uncertainty."""
        return "; ".join(f"{s.role} {s.volume_ml:g} mL ({s.device}, u = "
                         f"{s.standard_uncertainty_ml:.2g} mL)" for s in self.steps)


def volume_step(volume_ml: float, role: Role, *, device: str | None = None,
                tolerance_ml: float | None = None,
                distribution: Distribution = "rectangular") -> VolumeStep:
    """A volume with its tolerance, given explicitly or looked up by ``device``.

    Parameters
    ----------
    volume_ml : float
        Nominal volume (mL).
    role : {"aliquot", "final"}
    device : str, optional
        A key of :data:`VOLUMETRIC_CLASSES`; default ``pipette-A`` for an aliquot and
        ``flask-A`` for a final volume. Ignored when ``tolerance_ml`` is given.
    tolerance_ml : float, optional
        ± maximum error (mL), overriding the table.
    distribution : {"rectangular", "triangular"}

    Raises
    ------
    InputError
        Unknown device, or a glass volume that is not a nominal size in the table.
    """
    volume = check_number(volume_ml, "dilution, volume", "mL", positive=True)
    if tolerance_ml is not None:
        return VolumeStep(volume, role, float(tolerance_ml), distribution=distribution,
                          device="user")
    name = device or DEFAULT_DEVICE.get(role, "")
    if name not in VOLUMETRIC_CLASSES:
        raise InputError(f"dilution: unknown device {name!r}; devices are "
                         f"{', '.join(VOLUMETRIC_CLASSES)}")
    table = VOLUMETRIC_CLASSES[name][1]
    if name == "piston":
        sizes = [v for v in sorted(table) if v >= volume * (1 - 1e-9)]
        if not sizes:
            raise InputError(f"dilution: {volume:g} mL is above the largest piston pipette in "
                             f"the table ({max(table):g} mL); give the tolerance as "
                             f"{volume:g}±TOL")
        systematic, random = table[sizes[0]]  # type: ignore[misc]
        return VolumeStep(volume, role, systematic * sizes[0], random * sizes[0],
                          distribution=distribution, device=name)
    match = [v for v in table if abs(v - volume) <= 1e-9 * max(1.0, v)]
    if not match:
        sizes = ", ".join(f"{v:g}" for v in sorted(table))
        raise InputError(f"dilution: no {volume:g} mL {name} in the table (sizes {sizes} mL); "
                         f"give the tolerance as {volume:g}±TOL")
    return VolumeStep(volume, role, float(table[match[0]]),  # type: ignore[arg-type]
                      distribution=distribution, device=name)


_TOKEN = re.compile(r"^\s*(?P<v>[0-9.eE+-]+?)\s*(?:(?:±|\+-|\+/-)\s*(?P<t>[0-9.eE+-]+)|"
                    r":\s*(?P<d>[A-Za-z-]+))?\s*$")


def parse_dilution(text: str, *, distribution: Distribution = "rectangular") -> Dilution:
    """Parse a dilution written as ``ALIQUOT/FINAL[,ALIQUOT/FINAL...]`` (volumes in mL).

    Each volume is ``V`` (device by default: ``pipette-A`` for the aliquot, ``flask-A``
    for the final volume), ``V:DEVICE`` (a :data:`VOLUMETRIC_CLASSES` key) or ``V±TOL``
    (also ``V+-TOL``; TOL the ± maximum error in mL). Examples: ``1/10``;
    ``0.1:piston/10:flask-B``; ``1±0.01/10±0.04,2/25``.

    Raises
    ------
    InputError
        A step that is not ``ALIQUOT/FINAL``, a volume that is not a number, an unknown
        device.
    """
    steps: list[VolumeStep] = []
    for part in str(text).split(","):
        pieces = part.split("/")
        if len(pieces) != 2:
            raise InputError(f"dilution: step {part.strip()!r} is not ALIQUOT/FINAL in mL, "
                             "e.g. 1/10 or 0.1:piston/10:flask-A")
        for token, role in zip(pieces, ("aliquot", "final"), strict=True):
            m = _TOKEN.match(token)
            try:
                if m is None:
                    raise ValueError
                volume = float(m["v"])
                tol = float(m["t"]) if m["t"] else None
            except ValueError:
                raise InputError(f"dilution: {token.strip()!r} in step {part.strip()!r} is "
                                 "not a volume in mL (V, V:DEVICE or V±TOL)") from None
            steps.append(volume_step(volume, role, device=m["d"],  # type: ignore[arg-type]
                                     tolerance_ml=tol, distribution=distribution))
    return Dilution(tuple(steps))
