"""Flag strings (mixsolve.flags.flag_texts) against their definition in docs/flags.md.

The definition is applied here spectrum by spectrum (codes in the order status codes,
at_zero, negative; joined with ';'); the vectorised function must give
the same strings whether a spectrum's codes fit in one 64-bit key or not, and whether the
texts come from a shared cache or are built afresh. Numbers invented and seeded.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from mixsolve.flags import STATUS_CODES, VLEN_STR, flag_texts


def by_definition(status, at_zero, conc, names, ols) -> list[str]:
    """docs/flags.md, one spectrum at a time."""
    out = []
    for i in range(status.size):
        codes = [code for bit, code in STATUS_CODES.items() if status[i] & bit]
        codes += [f"at_zero:{c}" for c, z in zip(names, at_zero[i], strict=True) if z]
        if ols:
            codes += [f"negative:{c}" for c, v in zip(names, conc[i], strict=True) if v < 0]
        out.append(";".join(codes))
    return out


# 15 status bits + 3 or 6 component bits; 15 + 50 (nnls) or 15 + 100 (ols) > 63 bits
@pytest.mark.parametrize("n_components", [3, 50])
@pytest.mark.parametrize("ols", [False, True])
def test_flag_texts_equal_the_definition(rng: np.random.Generator, n_components: int,
                                         ols: bool) -> None:
    """Random status bits and per-component codes, NaN uncertainties included."""
    n = 400
    names = [f"c{k}" for k in range(n_components)]
    status = rng.integers(0, 2 ** len(STATUS_CODES), n) * (rng.random(n) < 0.3)
    conc = rng.normal(1.0, 1.0, (n, n_components))
    at_zero = (rng.random((n, n_components)) < 0.2) & (not ols)
    conc[at_zero] = 0.0
    known: dict[int, str] = {}
    got = flag_texts(status, at_zero, conc, names, ols=ols, known=known)
    want = by_definition(status, at_zero, conc, names, ols)
    assert got.dtype == VLEN_STR
    assert list(got) == want
    again = flag_texts(status, at_zero, conc, names, ols=ols, known=known)
    assert list(again) == want


def test_flag_texts_keep_the_shape() -> None:
    """Any leading shape (an image) and none at all (one spectrum)."""
    status = np.array([[0, 16], [32, 0]])
    zeros = np.zeros((2, 2, 1), dtype=bool)
    conc = np.ones((2, 2, 1))
    got = flag_texts(status, zeros, conc, ["a"], ols=False)
    assert got.shape == (2, 2) and got[0, 1] == "above_range" and got[1, 0] == "below_range"
    one = flag_texts(np.array(0), np.zeros(1, bool), np.ones(1), ["a"], ols=False)
    assert one.shape == () and one[()] == ""


def test_every_flag_code_lives_in_flags_with_its_meaning():
    """Every code (status, component, plate well and sample, PLS) is a constant of
    mixsolve.flags with a one-line meaning there, and is documented."""
    import mixsolve.flags as flags

    not_codes = {*flags.SEVERITIES, flags.RUN_NOTES_ATTR, *flags.RUN_NOTE_MEANINGS}
    codes = set(STATUS_CODES.values()) | {
        value for name, value in vars(flags).items() if name.isupper() and isinstance(value, str)
        and value not in not_codes}
    assert codes == set(flags.FLAG_MEANINGS)
    assert set(flags.COMPONENT_CODES) <= codes
    docs = Path(__file__).parents[1] / "docs"
    text = "".join((docs / name).read_text(encoding="utf-8") for name in ("flags.md",
                                                                           "plates.md"))
    for code in codes:
        assert f"`{code}" in text, code
