"""Read a set of published fixed-wavelength equations (docs/formats.md, "Equations").

The file is a CSV (or TSV) table, one row per term, below ``# key: value`` lines that
describe the set::

    # name: porra1989
    # citation: Porra, Thompson & Kriedemann 1989, Biochim. Biophys. Acta 975:384-394
    # status: from memory
    # unit: ug/mL
    component,coefficient,wavelength_nm,uses,read,u_coefficient
    chl_a,12.25,663.6,,,
    chl_a,-2.55,646.6,,,

Keys: ``name``, ``citation``, ``status`` (``seen`` or ``from memory``) and ``unit`` are
required; ``pathlength_cm`` (default 1), ``reference_nm``, ``solvent``,
``bandwidth_class``, ``bandwidth_nm`` and ``note`` are optional. Columns ``component``
and ``coefficient`` are required, with one of ``wavelength_nm`` (an absorbance term) or
``uses`` (another component's result) filled per row; ``read`` (before/after, for an
acidification set) and ``u_coefficient`` are optional. A coefficient may be written as
numbers joined by ``*`` and ``/`` (``1000/198``, ``26.7*1.7``) to keep a published form exact.

The sets shipped with mixsolve are named instead of a file (:data:`SHIPPED`).
"""

from __future__ import annotations

import os
import re
from importlib import resources
from pathlib import Path

from mixsolve.equations.model import FROM_MEMORY, READS, SEEN, EquationSet, Term
from mixsolve.errors import FileFormatError, InputError
from mixsolve.io.tables import RawTable, header_names, parse_number, read_table

PathLike = str | os.PathLike[str]

#: Shipped sets: name -> file in mixsolve/equations/published/.
SHIPPED: dict[str, str] = {
    "porra1989": "porra1989.csv",
    "lichtenthaler1987": "lichtenthaler1987.csv",
    "jeffrey_humphrey1975": "jeffrey_humphrey1975.csv",
    "lorenzen1967": "lorenzen1967.csv",
}
REQUIRED_KEYS = ("name", "citation", "status", "unit")
OPTIONAL_KEYS = ("pathlength_cm", "reference_nm", "solvent", "bandwidth_class",
                 "bandwidth_nm", "note")
REQUIRED_COLUMNS = ("component", "coefficient")
OPTIONAL_COLUMNS = ("wavelength_nm", "uses", "read", "u_coefficient")
#: Largest equations file read (bytes): a few dozen terms need a few kB.
MAX_BYTES = 1_000_000
_KEY_LINE = re.compile(r"^\s*#\s*([A-Za-z_]+)\s*:(.*)$")


def shipped_path(name: str) -> Path:
    """The file of a shipped set (inside the installed package)."""
    return Path(str(resources.files("mixsolve.equations") / "published" / SHIPPED[name]))


def read_equations(source: PathLike) -> EquationSet:
    """Read and check an equations file, or a shipped set by name.

    Parameters
    ----------
    source : path-like or str
        A file, or the name of a shipped set (``porra1989``, ``lichtenthaler1987``,
        ``jeffrey_humphrey1975``, ``lorenzen1967``); an existing file of that name wins.

    Returns
    -------
    EquationSet
        ``source`` is the file's name, or ``shipped:<name>``.

    Raises
    ------
    FileFormatError, InputError
        One line naming the file, the line, the value and the fix: a missing or unknown
        key, a missing column, a term with both or neither of wavelength_nm and uses, a
        number that is not one, a reused component without an equation, and the checks
        of :func:`mixsolve.equations.model.check_set`.
    """
    text = os.fspath(source)
    path = Path(text)
    label = path.name
    if not path.exists() and text.lower() in SHIPPED:
        path, label = shipped_path(text.lower()), f"shipped:{text.lower()}"
    elif not path.exists():
        raise FileFormatError(f"{text}: no such file, nor a shipped set; shipped sets are "
                              f"{', '.join(SHIPPED)}")
    if path.is_file() and path.stat().st_size > MAX_BYTES:
        raise FileFormatError(f"{label}: {path.stat().st_size} bytes is too large for an "
                              f"equations file (at most {MAX_BYTES}); is it the right file?")
    meta = _metadata(path, label)
    table = read_table(path, find_header=_is_header)
    table.name = label
    terms = _terms(table)
    where = f"{label}, line 1"
    try:
        return EquationSet(
            name=meta["name"], terms=tuple(terms), unit=meta["unit"],
            pathlength_cm=_number(meta, "pathlength_cm", label, 1.0),
            citation=meta["citation"], status=_status(meta["status"], label),
            reference_nm=_number(meta, "reference_nm", label, None),
            solvent=meta.get("solvent", ""), bandwidth_class=meta.get("bandwidth_class", ""),
            bandwidth_nm=_number(meta, "bandwidth_nm", label, None),
            note=meta.get("note", ""), source=label)
    except FileFormatError:
        raise
    except InputError as err:
        msg = str(err)
        raise FileFormatError(msg if msg.startswith(label) else f"{where}: {msg}") from None


def _metadata(path: Path, label: str) -> dict[str, str]:
    """The ``# key: value`` lines of the file, checked."""
    try:
        lines = path.read_text(encoding="utf-8-sig").splitlines()
    except UnicodeDecodeError:
        raise FileFormatError(f"{label}: not UTF-8 text; save the file as UTF-8 CSV") from None
    except OSError as err:
        raise FileFormatError(f"{label}: cannot be read ({err.strerror})") from None
    meta: dict[str, str] = {}
    for n, line in enumerate(lines, start=1):
        found = _KEY_LINE.match(line)
        if not found:
            continue
        key, value = found.group(1).lower(), found.group(2).strip()
        if key not in REQUIRED_KEYS + OPTIONAL_KEYS:
            raise FileFormatError(f"{label}, line {n}: unknown key {key!r}; keys are "
                                  f"{', '.join(REQUIRED_KEYS + OPTIONAL_KEYS)} (write other "
                                  "comments without a colon after the first word)")
        if key in meta:
            raise FileFormatError(f"{label}, line {n}: key {key!r} given twice; keep one")
        meta[key] = value
    missing = [k for k in REQUIRED_KEYS if not meta.get(k)]
    if missing:
        raise FileFormatError(f"{label}: missing {', '.join(missing)}; give each as a line "
                              f"'# {missing[0]}: ...' above the table")
    return meta


def _is_header(cells: list[str]) -> bool:
    """The table's header: the first row with a ``component`` column."""
    return "component" in [str(c).strip().lstrip("\ufeff").lower() for c in cells]


def _status(text: str, label: str) -> str:
    low = text.strip().lower()
    if low == SEEN:
        return SEEN
    if low.startswith("from memory"):
        return FROM_MEMORY
    raise FileFormatError(f"{label}: status {text!r} is neither 'seen' (coefficients read in "
                          "the source) nor 'from memory'; write one of them")


def _number(meta: dict[str, str], key: str, label: str,
            default: float | None) -> float | None:
    text = meta.get(key, "").strip()
    if not text:
        return default
    return parse_number(text, ".", f"{label}: {key}", allow_missing=False)


def _terms(table: RawTable) -> list[Term]:
    names = header_names(table, REQUIRED_COLUMNS, "an equations table",
                         optional_note="optional: " + ", ".join(OPTIONAL_COLUMNS))
    col = {c: names.index(c) for c in REQUIRED_COLUMNS + OPTIONAL_COLUMNS if c in names}
    terms = []
    for i, row in enumerate(table.rows):
        cells = [str(c).strip() for c in row] + [""] * (len(names) - len(row))

        def cell(name: str, cells: list[str] = cells) -> str:
            return cells[col[name]] if name in col else ""

        def at(name: str, i: int = i) -> str:
            return table.where(i, col.get(name))

        if not cell("component"):
            raise FileFormatError(f"{at('component')}: empty component; name the result")
        wl, uses = cell("wavelength_nm"), cell("uses")
        if bool(wl) == bool(uses):
            raise FileFormatError(f"{table.where(i)}: give either wavelength_nm or uses, not "
                                  f"{'both' if wl else 'neither'}")
        read = cell("read").lower()
        if read not in READS:
            raise FileFormatError(f"{at('read')}: read {cell('read')!r} is not before or "
                                  "after; leave it empty for a set of one read")
        u_text = cell("u_coefficient")
        terms.append(Term(
            component=cell("component"),
            coefficient=_coefficient(cell("coefficient"), table.decimal, at("coefficient")),
            wavelength_nm=parse_number(wl, table.decimal, at("wavelength_nm"),
                                       allow_missing=False) if wl else None,
            uses=uses or None, read=read,
            u_coefficient=parse_number(u_text, table.decimal, at("u_coefficient"),
                                       allow_missing=False) if u_text else 0.0,
            line=table.lines[i]))
    return terms


def _coefficient(text: str, decimal: str, where: str) -> float:
    """A number, or numbers joined by ``*`` and ``/`` read left to right (``1000/198``)."""
    parts = re.split(r"([*/])", text)
    value = parse_number(parts[0], decimal, where, allow_missing=False)
    for op, part in zip(parts[1::2], parts[2::2], strict=True):
        number = parse_number(part, decimal, where, allow_missing=False)
        if op == "/" and number == 0:
            raise FileFormatError(f"{where}: {text!r} divides by 0; write the coefficient")
        value = value * number if op == "*" else value / number
    return value
