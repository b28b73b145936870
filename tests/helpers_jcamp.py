"""A small JCAMP-DX writer for the tests, written from the standard, not from mixsolve.

McDonald & Wilks (1988), Appl. Spectrosc. 42, 151 (from memory): labelled data records
``##LABEL=value``; ``##XYDATA=(X++(Y..Y))`` lines start with the abscissa of their first
ordinate (in units of XFACTOR), ordinates are integers in units of YFACTOR; the ASDF forms
SQZ (``@A-I``/``a-i`` carry the sign and first digit of an absolute value), DIF
(``%J-R``/``j-r``, a difference to the previous value) and DUP (``S-Z``, ``s``: the count
of a repeated value or difference, the first included); a line that ends in DIF form is
followed by one that repeats its last ordinate (the Y check). ``##XYPOINTS=(XY..XY)`` in
AFFN. ``##DATA TYPE=LINK`` with ``##BLOCKS=`` holds several blocks. The writer shares no
code with ``mixsolve.io.jcamp``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

SQZ_POS, SQZ_NEG = "@ABCDEFGHI", "abcdefghi"
DIF_POS, DIF_NEG = "%JKLMNOPQR", "jklmnopqr"
DUP = "STUVWXYZs"


def _lead(value: int, pos: str, neg: str) -> str:
    digits = str(abs(value))
    first = int(digits[0])
    return (pos[first] if value >= 0 else neg[first - 1]) + digits[1:]


def sqz(value: int) -> str:
    """An integer in SQZ form (``100`` → ``A00``, ``-25`` → ``b5``)."""
    return _lead(value, SQZ_POS, SQZ_NEG)


def dif(value: int) -> str:
    """A difference in DIF form (``20`` → ``K0``, ``0`` → ``%``)."""
    return _lead(value, DIF_POS, DIF_NEG)


def dup(count: int) -> str:
    """A repeat count (the first included) in DUP form (``3`` → ``U``, ``12`` → ``S2``)."""
    digits = str(count)
    return DUP[int(digits[0]) - 1] + digits[1:]


def _difdup_lines(x: Sequence[int], y: Sequence[int], per_line: int) -> list[str]:
    """XYDATA lines in SQZ + DIF + DUP, with the Y check after every DIF line."""
    lines = []
    start = 0
    n = len(y)
    while True:
        end = min(start + per_line, n - 1)  # the line holds points start..end
        text = f"{x[start]}{sqz(y[start])}"
        diffs = [y[i + 1] - y[i] for i in range(start, end)]
        k = 0
        while k < len(diffs):
            run = 1
            while k + run < len(diffs) and diffs[k + run] == diffs[k]:
                run += 1
            text += dif(diffs[k]) + (dup(run) if run > 1 else "")
            k += run
        lines.append(text)
        if end >= n - 1:
            if not diffs:  # a last line holding one point ends in SQZ: no check follows
                break
            lines.append(f"{x[n - 1]}{sqz(y[n - 1])}")  # the closing Y check line
            break
        start = end  # the next line repeats the last point: the Y check
    return lines


def _affn_lines(x: Sequence[int], y: Sequence[int], per_line: int, pac: bool) -> list[str]:
    lines = []
    for start in range(0, len(y), per_line):
        chunk = y[start:start + per_line]
        if pac:  # PAC: every value carries its sign, which also separates
            lines.append(f"{x[start]}" + "".join(f"{v:+d}" for v in chunk))
        else:
            lines.append(f"{x[start]} " + " ".join(str(v) for v in chunk))
    return lines


def _sqz_lines(x: Sequence[int], y: Sequence[int], per_line: int) -> list[str]:
    return [f"{x[s]}" + "".join(sqz(v) for v in y[s:s + per_line])
            for s in range(0, len(y), per_line)]


def jcamp_block(title: str, wl: np.ndarray, values: np.ndarray, *, form: str = "DIFDUP",
                xunits: str = "NANOMETERS", yunits: str = "ABSORBANCE",
                xfactor: float = 1.0, yfactor: float = 1e-6, per_line: int = 10) -> list[str]:
    """One block (``##TITLE`` to ``##END``) of one spectrum.

    ``form``: ``AFFN``, ``PAC``, ``SQZ`` or ``DIFDUP`` (XYDATA) or ``XYPOINTS`` (AFFN
    pairs, written with ``repr`` of the values over the factors). Ordinates are rounded to
    multiples of ``yfactor``: :func:`quantized` gives the values a reader should return.
    """
    head = [f"##TITLE={title}", "##JCAMP-DX=4.24", "##DATA TYPE=UV/VIS SPECTRUM",
            f"##XUNITS={xunits}", f"##YUNITS={yunits}", f"##XFACTOR={xfactor!r}",
            f"##YFACTOR={yfactor!r}", f"##FIRSTX={float(wl[0])!r}", f"##LASTX={float(wl[-1])!r}",
            f"##NPOINTS={wl.size}"]
    if form == "XYPOINTS":
        pairs = [f"{float(w / xfactor)!r}, {float(v / yfactor)!r}"
                 for w, v in zip(wl, values, strict=True)]
        return [*head, "##XYPOINTS=(XY..XY)", *pairs, "##END="]
    x = [round(float(w) / xfactor) for w in wl]
    y = [round(float(v) / yfactor) for v in values]
    lines = {"DIFDUP": lambda: _difdup_lines(x, y, per_line),
             "SQZ": lambda: _sqz_lines(x, y, per_line),
             "AFFN": lambda: _affn_lines(x, y, per_line, pac=False),
             "PAC": lambda: _affn_lines(x, y, per_line, pac=True)}[form]()
    return [*head, f"##FIRSTY={float(y[0] * yfactor)!r}", "##XYDATA=(X++(Y..Y))", *lines, "##END="]


def quantized(values: np.ndarray, yfactor: float = 1e-6) -> np.ndarray:
    """The values as an XYDATA file holds them: integers in units of ``yfactor``."""
    return np.round(np.asarray(values) / yfactor) * yfactor


def write_jcamp(path: Path, spectra: Mapping[str, np.ndarray], wl: np.ndarray,
                **options: object) -> Path:
    """One spectrum as a plain file, several in one ``##DATA TYPE=LINK`` block."""
    blocks = [jcamp_block(title, wl, values, **options)  # type: ignore[arg-type]
              for title, values in spectra.items()]
    if len(blocks) == 1:
        lines = blocks[0]
    else:
        lines = [f"##TITLE={path.stem}", "##JCAMP-DX=5.01", "##DATA TYPE=LINK",
                 f"##BLOCKS={len(blocks)}"]
        for k, block in enumerate(blocks, start=1):
            lines += [block[0], f"##BLOCK_ID={k}", *block[1:]]
        lines.append("##END=")
    path.write_text("\n".join(lines) + "\n", encoding="ascii")
    return path
