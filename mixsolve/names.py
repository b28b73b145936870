"""Names as people read them: one normal form for component, sample and well names.

Two names that print the same must be the same name, and two names a person would take
for one must not be two. Every place where names enter mixsolve (spectra tables and
arrays, libraries, standards sheets, plate layouts, reference tables) passes them through
:func:`normalise_name` and checks a set of them with :func:`check_unique_names`.

The normal form (:func:`normalise_name`):

1. zero-width characters are removed: zero-width space U+200B, zero-width non-joiner
   U+200C, zero-width joiner U+200D and the zero-width no-break space / byte-order mark
   U+FEFF;
2. Unicode normalisation form C (canonical composition: ``e`` followed by a combining
   acute accent becomes ``é``), as :func:`unicodedata.normalize` does it;
3. every white-space character (:meth:`str.isspace`: tab, line breaks, the space
   separators of Unicode category Zs such as no-break space U+00A0, the en, em, thin and
   narrow no-break spaces, ideographic space ...) becomes a plain space U+0020;
4. surrounding white space is stripped.

Names whose normal forms differ only in letter case (:meth:`str.casefold`), or that have
the same normal form but were spelled differently, are refused with both spellings named.
In a column that names one thing on many lines (a sample in many wells) the same
spelling may repeat, but two spellings of one name are still refused
(:func:`check_spellings`).
"""

from __future__ import annotations

import unicodedata
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from mixsolve.errors import InputError

#: Zero-width characters removed from names (a ``str.translate`` table).
ZERO_WIDTH = dict.fromkeys(map(ord, "\u200b\u200c\u200d\ufeff"))
#: ASCII white space other than the plain space (tab, line breaks ...) as plain spaces.
ASCII_SPACES = {ord(ch): " " for ch in map(chr, range(128)) if ch.isspace() and ch != " "}


def normalise_name(name: object) -> str:
    """The normal form of a name (see the module docstring).

    Parameters
    ----------
    name : object
        A name; anything else is turned into text with ``str``.

    Returns
    -------
    str
        Without zero-width characters, in Unicode NFC, white space (tabs, no-break
        spaces ...) as plain spaces, surrounding white space stripped.
    """
    text = str(name)
    if text.isascii():
        return text.translate(ASCII_SPACES).strip()
    text = unicodedata.normalize("NFC", text.translate(ZERO_WIDTH))
    return "".join(" " if ch.isspace() else ch for ch in text).strip()


def name_key(name: object) -> str:
    """What two names must not share: the case-folded normal form."""
    return normalise_name(name).casefold()


def _shown(first: str, second: str) -> tuple[str, str]:
    """Both spellings as they can be told apart: ``repr``, or ASCII escapes when the
    ``repr`` forms would look alike (a difference in Unicode form only)."""
    a, b = repr(first), repr(second)
    if unicodedata.normalize("NFC", a) == unicodedata.normalize("NFC", b):
        return ascii(first), ascii(second)
    return a, b


def near_duplicate_message(first: str, second: str, where: str, *,
                           lines: tuple[int, int] | None = None,
                           fix: str = "rename one") -> str:
    """The refusal for two spellings of one name, each shown so that they differ.

    ``lines`` are the file lines of the two spellings, named after each; ``fix`` ends the
    message.
    """
    a, b = _shown(first, second)
    if lines is not None:
        a, b = f"{a} (line {lines[0]})", f"{b} (line {lines[1]})"
    prefix = f"{where}: " if where else ""
    if first == second:
        return f"{prefix}name {a} appears twice; {fix}"
    if unicodedata.normalize("NFC", first) == unicodedata.normalize("NFC", second):
        return f"{prefix}names {a} and {b} differ only in Unicode form; {fix}"
    return f"{prefix}names {a} and {b} differ only in case or spacing; {fix}"


def check_unique_names(names: Iterable[object], where: str) -> list[str]:
    """Normalise names and refuse two that a person would read as one.

    Parameters
    ----------
    names : iterable
        The names of one set (the samples of a table, the components of a library),
        each given once: a repeated spelling is refused too.
    where : str
        Where the names come from (file name, sheet, "library"), for the message.

    Returns
    -------
    list of str
        The names in their normal form, in the given order.

    Raises
    ------
    InputError
        An empty name, or two names with one case-folded normal form, naming both
        spellings: "names 'Ext_03 ' and 'ext_03' differ only in case or spacing; rename
        one".
    """
    raw = [n if isinstance(n, str) else str(n) for n in names]
    out = [normalise_name(n) for n in raw]
    keys = {name.casefold() for name in out}
    if len(keys) == len(out) and "" not in keys:  # the common case, in one pass
        return out
    seen: dict[str, int] = {}
    for i, name in enumerate(out):
        if not name:
            raise InputError(f"{where}: name {raw[i]!r} is empty once spaces are removed; "
                             "give every name visible characters")
        key = name.casefold()
        if key in seen:
            raise InputError(near_duplicate_message(raw[seen[key]], raw[i], where))
        seen[key] = i
    return out


def check_spellings(names: Iterable[object], where: str,
                    lines: Sequence[int] | None = None) -> list[str]:
    """Normalise names that may repeat (a sample named in many rows) and refuse two
    spellings of one name.

    The same spelling on many rows is one name; two different spellings whose normal
    forms differ at most in case (``Ext03`` and ``Ext03 ``, ``Ext\u00a003`` and ``Ext 03``,
    ``Mix 1`` and ``mix 1``) are refused: they may be two things that were meant to be
    told apart, and pooling them would be silent.

    Parameters
    ----------
    names : iterable
        Names as written (not stripped), one per row; a name may appear any number of
        times.
    where : str
        Where the names come from, for the message.
    lines : sequence of int, optional
        The file line of each name, to name the first line of each spelling.

    Returns
    -------
    list of str
        The names in their normal form, in the given order (repeats kept); a name that
        is empty once normalised is returned empty (the caller says whether it may be).

    Raises
    ------
    InputError
        Two spellings with one case-folded normal form, both named with their lines
        ("names 'Mix 1 ' (line 3) and 'mix 1' (line 7) differ only in case or spacing;
        ...").
    """
    raw = [n if isinstance(n, str) else str(n) for n in names]
    first_row: dict[str, int] = {}
    for i, given in enumerate(raw):
        first_row.setdefault(given, i)
    normal = {given: normalise_name(given) for given in first_row}
    spelling: dict[str, str] = {}
    for given, name in normal.items():
        if not name:
            continue
        other = spelling.setdefault(name.casefold(), given)
        if other != given:
            at = None if lines is None else (lines[first_row[other]], lines[first_row[given]])
            raise InputError(near_duplicate_message(
                other, given, where, lines=at,
                fix="write one name the same way on every line, or rename one"))
    return [normal[n] for n in raw]


def per_component(given: Mapping[object, Any], components: Sequence[str], what: str,
                  value_of: Callable[[Any, str], float], fill: float, *,
                  value_name: str | None = None) -> np.ndarray:
    """Values given by component name, as one array in the order of ``components``.

    Parameters
    ----------
    given : mapping
        Component name (any spelling that normalises to one of ``components``) → value.
    components : sequence of str
        The component names, in normal form.
    what : str
        How messages name the values (``"molar mass"``, ``"u_scale_rel"``).
    value_of : callable
        Checks one value and returns it as float; called with the value and its label
        (``"<value_name> of 'name'"``).
    fill : float
        The value of components not given.
    value_name : str, optional
        The values' name in that label (default ``what``; the API parameter's name).

    Raises
    ------
    InputError
        A name that is no component, or one component given twice (two spellings).
    """
    out = np.full(len(components), fill, dtype=float)
    seen: set[str] = set()
    for raw, value in given.items():
        name = normalise_name(raw)
        if name in seen:
            raise InputError(f"{what}: {name!r} is given twice; give each component once")
        seen.add(name)
        if name not in components:
            raise InputError(f"{what} given for {name!r}, which is not a component "
                             f"(components: {', '.join(components)})")
        out[list(components).index(name)] = value_of(value,
                                                     f"{value_name or what} of {name!r}")
    return out
