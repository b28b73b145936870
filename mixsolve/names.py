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
3. every space separator (Unicode category Zs: no-break space U+00A0, the en, em, thin
   and narrow no-break spaces, ideographic space ...) becomes a plain space U+0020;
4. surrounding white space is stripped.

Names whose normal forms differ only in letter case (:meth:`str.casefold`), or that have
the same normal form but were spelled differently, are refused with both spellings named.
"""

from __future__ import annotations

import unicodedata
from collections.abc import Iterable

from mixsolve.errors import InputError

#: Zero-width characters removed from names (a ``str.translate`` table).
ZERO_WIDTH = dict.fromkeys(map(ord, "\u200b\u200c\u200d\ufeff"))


def normalise_name(name: object) -> str:
    """The normal form of a name (see the module docstring).

    Parameters
    ----------
    name : object
        A name; anything else is turned into text with ``str``.

    Returns
    -------
    str
        Without zero-width characters, in Unicode NFC, space separators as plain spaces,
        surrounding white space stripped. Plain ASCII is only stripped.
    """
    text = str(name)
    if text.isascii():
        return text.strip()
    text = unicodedata.normalize("NFC", text.translate(ZERO_WIDTH))
    return "".join(" " if unicodedata.category(ch) == "Zs" else ch for ch in text).strip()


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


def near_duplicate_message(first: str, second: str, where: str) -> str:
    """The refusal for two spellings of one name, each shown so that they differ."""
    a, b = _shown(first, second)
    prefix = f"{where}: " if where else ""
    if first == second:
        return f"{prefix}name {a} appears twice; rename one"
    if normalise_name(first) == normalise_name(second) and \
            unicodedata.normalize("NFC", first.strip()) == \
            unicodedata.normalize("NFC", second.strip()):
        return f"{prefix}names {a} and {b} differ only in Unicode form; rename one"
    return f"{prefix}names {a} and {b} differ only in case or spacing; rename one"


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
    out = [n.strip() if n.isascii() else normalise_name(n) for n in raw]
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


def check_spellings(names: Iterable[object], where: str) -> list[str]:
    """Normalise names that may repeat (a sample named in many rows) and refuse two
    that differ only in case.

    Spellings with one normal form are one name (``Ext\u00a003`` and ``Ext 03`` name the
    same sample); normal forms that differ only in case are refused.

    Parameters
    ----------
    names : iterable
        Names, one per row; a name may appear any number of times.
    where : str
        Where the names come from, for the message.

    Returns
    -------
    list of str
        The names in their normal form, in the given order (repeats kept); a name that
        is empty once normalised is returned empty (the caller says whether it may be).

    Raises
    ------
    InputError
        Two spellings whose normal forms differ only in case, both named ("names
        'Mix 1 ' and 'mix 1' differ only in case or spacing; rename one").
    """
    raw = [n if isinstance(n, str) else str(n) for n in names]
    normal = {n: normalise_name(n) for n in dict.fromkeys(raw)}
    first: dict[str, str] = {}
    for given, name in normal.items():
        if not name:
            continue
        other = first.setdefault(name.casefold(), given)
        if normal[other] != name:
            raise InputError(near_duplicate_message(other, given, where))
    return [normal[n] for n in raw]
