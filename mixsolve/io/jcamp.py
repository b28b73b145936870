"""Read JCAMP-DX spectra (``.jdx``, ``.dx``): the open exchange format for spectra.

A JCAMP-DX file is text made of labelled data records, ``##LABEL=value``, grouped in
blocks from ``##TITLE=`` to ``##END=``; a ``##DATA TYPE=LINK`` block holds several such
blocks (one spectrum each). Read here:

- ``##XYDATA=(X++(Y..Y))``: evenly spaced ordinates; each line starts with the abscissa
  of its first ordinate (the X check), the abscissas are ``FIRSTX`` + i·(``LASTX`` −
  ``FIRSTX``)/(``NPOINTS`` − 1). Ordinates in AFFN (plain numbers, separated by blanks,
  commas or a sign) or in the compressed ASDF forms: SQZ (the sign and first digit of a
  value as one letter, ``@A-I`` for +0..+9, ``a-i`` for −1..−9), DIF (a difference to the
  previous value, ``%J-R`` for 0..+9, ``j-r`` for −1..−9) and DUP (``S-Z`` for 1..8, ``s``
  for 9: the previous value, or the previous difference, counted that many times in
  all). When a line ends in DIF form, the next line starts with that last ordinate
  again (the Y check); it is compared and dropped.
- ``##XYPOINTS=(XY..XY)``: (x, y) pairs in AFFN.
- ``##XFACTOR``/``##YFACTOR`` scale the numbers written to the values they stand for.
- ``##TITLE`` names the sample; ``##XUNITS`` must be ``NANOMETERS`` or ``1/CM``
  (wavenumbers, read as λ = 10⁷/ν̃ nm with ``axis`` ``"wavenumber_cm-1"``; ``MICROMETERS``
  is refused, with the fix); ``##YUNITS`` ``ABSORBANCE`` or
  ``TRANSMITTANCE`` (a fraction, or percent with ``quantity="percent_transmittance"``).
- An exponent is written with its sign (``1.5E+02``, as C and Fortran print it): a bare
  ``E`` or ``e`` is the SQZ letter for +5 or −5.
- ``$$`` starts a comment to the end of the line; labels compare without case, blanks,
  ``-``, ``/`` and ``_`` (``##FIRST X`` is ``##FIRSTX``).

Checked, each refusal naming the line: ``##NPOINTS`` against the points read, every
line's X against the abscissa its first ordinate should have, ``##FIRSTX``/``##LASTX``
against the points of ``XYPOINTS``, the Y checks, characters outside the forms.

References
----------
McDonald, R. S.; Wilks, P. A. (1988). JCAMP-DX: a standard form for exchange of infrared
spectra in computer readable form. Applied Spectroscopy 42(1), 151-162 (labelled data
records, XYDATA/XYPOINTS, AFFN and the ASDF forms SQZ, DIF, DUP, the X and Y checks).
Lampen, P.; Hillig, H.; Davies, A. N.; Linscheid, M. (1994). JCAMP-DX for mass
spectrometry. Applied Spectroscopy 48(12), 1545-1552 (restates the compression rules and
the block structure). Both from memory; the rules above are the ones implemented and
tested (``tests/test_jcamp.py``, files encoded by a test helper and by hand).

The general-purpose ``jcamp`` package on PyPI (1.3.2) was tried first and not used: it
prints failed X/Y checks and point-count mismatches instead of raising, and fails with an
IndexError on a DUP count after an SQZ value (``400 A10T``); a refusal here must be one
line naming the place.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.limits import MAX_TEXT_BYTES
from mixsolve.spectra import WAVENUMBER_AXIS, Quantity, nm_from_wavenumber

#: File name endings read as JCAMP-DX.
JCAMP_SUFFIXES = (".jdx", ".dx")
#: ##YUNITS read, and the quantities (:data:`mixsolve.spectra.QUANTITIES`) each may be.
Y_UNITS: dict[str, tuple[str, ...]] = {
    "ABSORBANCE": ("absorbance",),
    "TRANSMITTANCE": ("transmittance", "percent_transmittance"),
}
X_UNITS_NM = ("NANOMETERS", "NANOMETRES", "NM")
_WAVENUMBER = ("1/CM", "CM-1", "CM^-1", "/CM")
_MICROMETRE = ("MICROMETERS", "MICROMETRES", "MICRONS", "UM", "µM")

_SQZ = {c: d for d, c in enumerate("@ABCDEFGHI")} | {c: -d for d, c in enumerate("abcdefghi", 1)}
_DIF = {c: d for d, c in enumerate("%JKLMNOPQR")} | {c: -d for d, c in enumerate("jklmnopqr", 1)}
_DUP = {c: d for d, c in enumerate("STUVWXYZs", 1)}
_TOKEN = re.compile(r"""
    (?P<affn>[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]\d+)?)
  | (?P<sqz>[@A-Ia-i])(?P<sqz_digits>\d*\.?\d*)
  | (?P<dif>[%J-Rj-r])(?P<dif_digits>\d*\.?\d*)
  | (?P<dup>[S-Zs])(?P<dup_digits>\d*)
  | (?P<missing>\?)
  | (?P<sep>[\s,;]+)
""", re.VERBOSE)


@dataclass
class JcampSpectrum:
    """One spectrum of a JCAMP-DX file, in the file's units (x in nm, converted from
    wavenumbers when ``axis`` is ``"wavenumber_cm-1"``)."""

    title: str
    wavelength_nm: np.ndarray
    values: np.ndarray
    y_units: str
    line: int
    axis: str = "nm"


def is_jcamp(path: str | os.PathLike[str]) -> bool:
    """True for a ``.jdx``/``.dx`` file, or a file whose first text is ``##TITLE=`` (a
    table whose first line is a ``## ...`` comment stays a table)."""
    p = Path(path)
    if p.suffix.lower() in JCAMP_SUFFIXES:
        return True
    try:
        with open(p, "rb") as fh:
            head = fh.read(256).lstrip(b"\xef\xbb\xbf \t\r\n")
    except OSError:
        return False
    return re.match(rb"##\s*TITLE\s*=", head, re.IGNORECASE) is not None


def _label(text: str) -> str:
    return re.sub(r"[\s\-/_]", "", text).upper()


def _records(text: str, name: str) -> list[tuple[str, str, int, list[tuple[int, str]]]]:
    """(label, value, line, continuation lines) of every labelled data record."""
    records: list[tuple[str, str, int, list[tuple[int, str]]]] = []
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("$$", 1)[0].rstrip()
        if not line.strip():
            continue
        if line.lstrip().startswith("##"):
            body = line.lstrip()[2:]
            if "=" not in body:
                raise FileFormatError(f"{name}, line {number}: {line.strip()[:40]!r} has no '='; "
                                      "a JCAMP-DX record is ##LABEL=value")
            label, value = body.split("=", 1)
            records.append((_label(label), value.strip(), number, []))
        elif records:
            records[-1][3].append((number, line))
        else:
            raise FileFormatError(f"{name}, line {number}: text before the first ##TITLE=; a "
                                  "JCAMP-DX file starts with ##TITLE=")
    return records


def read_jcamp(path: str | os.PathLike[str]) -> list[JcampSpectrum]:
    """Every spectrum of a JCAMP-DX file (one, or several in LINK blocks).

    Returns
    -------
    list of JcampSpectrum
        In file order; abscissas in nm, ordinates scaled by ``YFACTOR``, as the file
        states them (``y_units``), not yet converted to absorbance.

    Raises
    ------
    FileFormatError, InputError
        Unreadable text, a broken block structure, a failed check, characters outside
        AFFN/ASDF, units that are not nm or not absorbance/transmittance.
    """
    p = Path(path)
    name = p.name
    try:
        size = p.stat().st_size
        if size > MAX_TEXT_BYTES:
            raise FileFormatError(f"{name}: {size / 1e9:.1f} GB is more than a JCAMP-DX file "
                                  f"may have ({MAX_TEXT_BYTES / 1e9:g} GB)")
        raw = p.read_bytes()
    except OSError as exc:
        raise FileFormatError(f"{path}: cannot read the file ({exc.strerror})") from None
    if b"\x00" in raw[:65536]:
        raise FileFormatError(f"{name}: binary data, not a JCAMP-DX text file")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")  # older files write titles in ISO 8859-1
    spectra: list[JcampSpectrum] = []
    stack: list[dict[str, tuple[str, int, list[tuple[int, str]]]]] = []
    for label, value, line, more in _records(text, name):
        if label == "TITLE":
            stack.append({})
        elif not stack:
            raise FileFormatError(f"{name}, line {line}: ##{label}= outside a block; each "
                                  "block starts with ##TITLE= and ends with ##END=")
        if label == "END":
            block = stack.pop()
            if "XYDATA" in block or "XYPOINTS" in block:
                spectra.append(_spectrum(block, name))
            continue
        stack[-1].setdefault(label, (value, line, more))
    if stack:
        raise FileFormatError(f"{name}: the block that starts on line {stack[-1]['TITLE'][1]} "
                              "has no ##END=; the file may be cut short")
    if not spectra:
        raise FileFormatError(f"{name}: no ##XYDATA= or ##XYPOINTS= block; mixsolve reads "
                              "spectra as (X++(Y..Y)) or (XY..XY) (a peak table or NTUPLES "
                              "is not a spectrum it can use)")
    return spectra


def _number(block: dict[str, tuple[str, int, list[tuple[int, str]]]], label: str, name: str,
            default: float | None = None) -> float:
    if label not in block:
        if default is not None:
            return default
        raise FileFormatError(f"{name}, line {_line(block)}: ##{label}= is missing; the "
                              "standard requires it with ##XYDATA=")
    text, line, _ = block[label]
    try:
        value = float(text.replace(",", ".") if text.count(",") == 1 and "." not in text
                      else text)
    except ValueError:
        raise FileFormatError(f"{name}, line {line}: ##{label}={text!r} is not a number") from None
    if not math.isfinite(value):
        raise FileFormatError(f"{name}, line {line}: ##{label}={text!r} is not finite")
    return value


def _line(block: dict[str, tuple[str, int, list[tuple[int, str]]]]) -> int:
    return block["TITLE"][1]


def _x_unit(block: dict[str, tuple[str, int, list[tuple[int, str]]]], name: str) -> str:
    """The axis ##XUNITS names (``"nm"`` or ``"wavenumber_cm-1"``); others refused."""
    if "XUNITS" not in block:
        raise FileFormatError(f"{name}, line {_line(block)}: ##XUNITS= is missing; add "
                              "##XUNITS=NANOMETERS (wavelengths in nm)")
    text, line, _ = block["XUNITS"]
    unit = text.strip().upper()
    if unit in X_UNITS_NM:
        return "nm"
    if unit.replace(" ", "") in _WAVENUMBER:
        return WAVENUMBER_AXIS
    if unit in _MICROMETRE:
        raise InputError(f"{name}, line {line}: ##XUNITS={text}: wavelengths in µm are not "
                         "read; export the spectrum with ##XUNITS=NANOMETERS")
    raise InputError(f"{name}, line {line}: ##XUNITS={text} is not a wavelength axis; "
                     "mixsolve reads ##XUNITS=NANOMETERS or ##XUNITS=1/CM")


def _spectrum(block: dict[str, tuple[str, int, list[tuple[int, str]]]], name: str
              ) -> JcampSpectrum:
    axis = _x_unit(block, name)
    xfactor = _number(block, "XFACTOR", name, 1.0)
    yfactor = _number(block, "YFACTOR", name, 1.0)
    for label, factor in (("XFACTOR", xfactor), ("YFACTOR", yfactor)):
        if factor == 0:
            raise FileFormatError(f"{name}, line {block[label][1]}: ##{label}=0; a factor "
                                  "scales the numbers written and cannot be 0")
    if "XYDATA" in block:
        form, line, rows = block["XYDATA"]
        if form.replace(" ", "").upper() != "(X++(Y..Y))":
            raise FileFormatError(f"{name}, line {line}: ##XYDATA={form}; mixsolve reads "
                                  "(X++(Y..Y))")
        x, y = _xydata(block, rows, xfactor, yfactor, name, line)
    else:
        form, line, rows = block["XYPOINTS"]
        if form.replace(" ", "").upper() != "(XY..XY)":
            raise FileFormatError(f"{name}, line {line}: ##XYPOINTS={form}; mixsolve reads "
                                  "(XY..XY)")
        x, y = _xypoints(block, rows, xfactor, yfactor, name, line)
    title = block["TITLE"][0].strip()
    y_units = block["YUNITS"][0].strip().upper() if "YUNITS" in block else ""
    if axis == WAVENUMBER_AXIS:
        if np.any(x <= 0):
            raise InputError(f"{name}, line {line}: wavenumber {x[x <= 0][0]:g} cm-1 is not "
                             "positive")
        x = nm_from_wavenumber(x)
    return JcampSpectrum(title, x, y, y_units, _line(block), axis)


def _tokens(text: str, name: str, number: int) -> list[tuple[str, float]]:
    """The values of one data line as (form, number): abs, dif, dup or missing."""
    out: list[tuple[str, float]] = []
    pos = 0
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if m is None:
            raise FileFormatError(
                f"{name}, line {number}: {text[pos]!r} at column {pos + 1} is not part of a "
                "JCAMP-DX number (AFFN, or the SQZ, DIF, DUP letters)")
        pos = m.end()
        kind = m.lastgroup if m.lastgroup in ("affn", "missing", "sep") else \
            next(k for k in ("sqz", "dif", "dup") if m.group(k) is not None)
        if kind == "sep":
            continue
        if kind == "affn":
            out.append(("abs", float(m.group("affn"))))
        elif kind == "missing":
            out.append(("abs", math.nan))
        elif kind == "dup":
            count = int(str(_DUP[m.group("dup")]) + m.group("dup_digits"))
            out.append(("dup", count))
        else:
            letter, digits = m.group(kind), m.group(f"{kind}_digits")
            lead = (_SQZ if kind == "sqz" else _DIF)[letter]
            value = float(f"{abs(lead)}{digits}") * (-1 if lead < 0 else 1)
            out.append(("abs" if kind == "sqz" else "dif", value))
    return out


def _expand(tokens: list[tuple[str, float]], name: str, number: int, room: int
            ) -> tuple[list[float], bool]:
    """Ordinates of a line's tokens (after its X), and whether the last one was DIF form.

    ``room``: how many ordinates the line may still hold (a DUP count beyond it is refused
    before anything is repeated: a damaged count must not fill the memory).
    """
    values: list[float] = []
    last: tuple[str, float] | None = None
    for kind, value in tokens:
        if kind == "dup":
            if last is None or value < 1:
                raise FileFormatError(f"{name}, line {number}: a DUP count with no value "
                                      "before it to repeat")
            if len(values) + value - 1 > room:
                raise FileFormatError(f"{name}, line {number}: a DUP count of {int(value)} "
                                      "runs past ##NPOINTS; the data are damaged")
            for _ in range(int(value) - 1):
                values.append(values[-1] + last[1] if last[0] == "dif" else last[1])
            continue
        if kind == "dif":
            if not values or math.isnan(values[-1]):
                raise FileFormatError(f"{name}, line {number}: a DIF value with no value "
                                      "before it on the line")
            values.append(values[-1] + value)
        else:
            values.append(value)
        last = (kind, value)
    return values, last is not None and last[0] == "dif"


def _xydata(block: dict[str, tuple[str, int, list[tuple[int, str]]]],
            rows: list[tuple[int, str]], xfactor: float, yfactor: float, name: str,
            line: int) -> tuple[np.ndarray, np.ndarray]:
    first_x = _number(block, "FIRSTX", name)
    last_x = _number(block, "LASTX", name)
    n_points = _number(block, "NPOINTS", name)
    if n_points < 1 or not float(n_points).is_integer():
        raise FileFormatError(f"{name}, line {block['NPOINTS'][1]}: ##NPOINTS="
                              f"{block['NPOINTS'][0]} is not a count of points")
    n = int(n_points)
    step = (last_x - first_x) / (n - 1) if n > 1 else 0.0
    tolerance = max(0.5 * abs(step), abs(xfactor)) if n > 1 else abs(xfactor)
    y: list[float] = []
    check_next = False
    if not rows:
        raise FileFormatError(f"{name}, line {line}: ##XYDATA= has no data lines")
    for number, text in rows:
        tokens = _tokens(text, name, number)
        if not tokens or tokens[0][0] != "abs" or math.isnan(tokens[0][1]):
            raise FileFormatError(f"{name}, line {number}: a data line starts with its X "
                                  "value (a number)")
        x_line = tokens[0][1] * xfactor
        values, ends_dif = _expand(tokens[1:], name, number, n + 1 - len(y))
        index = len(y)
        if check_next:
            if not values:
                raise FileFormatError(f"{name}, line {number}: the Y check value is missing "
                                      "(the line before ended in DIF form)")
            if not (values[0] == y[-1] or (math.isnan(values[0]) and math.isnan(y[-1]))):
                raise FileFormatError(
                    f"{name}, line {number}: Y check failed: the line starts with "
                    f"{values[0]:g} but the line before ended with {y[-1]:g}; the data are "
                    "damaged (a line lost or changed)")
            values = values[1:]
            index -= 1
        expected = first_x + index * step
        if abs(x_line - expected) > tolerance:
            raise FileFormatError(
                f"{name}, line {number}: X check failed: the line starts at {x_line:g} but its "
                f"first point should lie at {expected:g} (FIRSTX + i·(LASTX − FIRSTX)/"
                "(NPOINTS − 1)); a line may be lost, or ##FIRSTX/##LASTX/##NPOINTS are wrong")
        y.extend(values)
        check_next = ends_dif
    if len(y) != n:
        raise FileFormatError(f"{name}, line {block['NPOINTS'][1]}: ##NPOINTS={n} but "
                              f"{len(y)} points were read; the file is damaged or cut short")
    x = first_x + step * np.arange(n)
    return x, np.asarray(y) * yfactor


def _xypoints(block: dict[str, tuple[str, int, list[tuple[int, str]]]],
              rows: list[tuple[int, str]], xfactor: float, yfactor: float, name: str,
              line: int) -> tuple[np.ndarray, np.ndarray]:
    numbers: list[float] = []
    for number, text in rows:
        tokens = _tokens(text, name, number)
        if any(kind != "abs" for kind, _ in tokens):  # so no DUP is ever expanded here
            raise FileFormatError(f"{name}, line {number}: (XY..XY) pairs are plain numbers "
                                  "(AFFN); DIF and DUP forms belong to (X++(Y..Y))")
        numbers.extend(v for _, v in tokens)
    if not numbers or len(numbers) % 2:
        raise FileFormatError(f"{name}, line {line}: ##XYPOINTS= holds {len(numbers)} numbers; "
                              "expected x, y pairs")
    x = np.asarray(numbers[0::2]) * xfactor
    y = np.asarray(numbers[1::2]) * yfactor
    if np.isnan(x).any():
        raise FileFormatError(f"{name}, line {line}: a missing X ('?') in ##XYPOINTS=")
    if "NPOINTS" in block and _number(block, "NPOINTS", name) != x.size:
        raise FileFormatError(f"{name}, line {block['NPOINTS'][1]}: ##NPOINTS="
                              f"{block['NPOINTS'][0]} but {x.size} points were read")
    for label, value in (("FIRSTX", x[0]), ("LASTX", x[-1])):
        if label in block:
            stated = _number(block, label, name)
            if abs(stated - value) > max(abs(xfactor), 1e-9 * abs(stated)):
                raise FileFormatError(f"{name}, line {block[label][1]}: ##{label}={stated:g} "
                                      f"but the points run from {x[0]:g} to {x[-1]:g}")
    return x, y


def jcamp_quantity(spectrum: JcampSpectrum, quantity: Quantity | None, where: str
                   ) -> Quantity:
    """What a spectrum's ordinates are, from ``##YUNITS`` and the ``quantity`` asked for.

    Raises
    ------
    InputError
        ``##YUNITS`` other than absorbance or transmittance, missing with no ``quantity``,
        or contradicting ``quantity``; transmittance above 1.5 without
        ``quantity="percent_transmittance"``.
    """
    units = spectrum.y_units
    if not units:
        if quantity is None:
            raise FileFormatError(f"{where}: ##YUNITS= is missing; add ##YUNITS=ABSORBANCE (or "
                                  "TRANSMITTANCE), or say what the numbers are with quantity")
        return quantity
    allowed = Y_UNITS.get(units)
    if allowed is None:
        raise InputError(f"{where}: ##YUNITS={units} cannot be read as absorbance; mixsolve "
                         "reads ##YUNITS=ABSORBANCE or TRANSMITTANCE")
    if quantity is not None:
        if quantity not in allowed:
            raise InputError(f"quantity: {quantity!r}, but {where} says ##YUNITS={units}; "
                             "leave quantity out, or correct the file")
        return quantity
    top = np.nanmax(spectrum.values) if np.isfinite(spectrum.values).any() else 0.0
    if units == "TRANSMITTANCE" and top > 1.5:
        raise InputError(f"{where}: ##YUNITS=TRANSMITTANCE but values reach {top:g}, not a "
                         "fraction 0-1; if they are percent, give quantity "
                         "percent_transmittance")
    return allowed[0]  # type: ignore[return-value]
