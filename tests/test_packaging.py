"""The package list in pyproject.toml names every subpackage, and demo data ship with it.

CI installs mixsolve non-editable from that explicit list, so a subpackage left out of it
would be missing from the installed package while the source tree still looked fine.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _pyproject() -> dict:
    """The project's pyproject.toml (the suite always runs from a checkout, CI's included)."""
    return tomllib.loads((ROOT / "pyproject.toml").read_text())


def test_every_subpackage_is_listed():
    """Each folder of mixsolve/ holding an __init__.py appears in tool.setuptools.packages."""
    listed = set(_pyproject()["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts)
             for p in (ROOT / "mixsolve").rglob("__init__.py")}
    assert found <= listed, f"missing from pyproject.toml: {sorted(found - listed)}"


def test_demo_data_are_installed_with_the_package():
    """The demo's files are reachable through the installed package (or the checkout)."""
    from mixsolve.workflows.demo import demo_file

    for name in ("standards_spectra.csv", "standards.csv", "batches_spectra.csv",
                 "batches_truth.csv", "README.md"):
        assert demo_file(name).is_file(), name


def test_every_public_name_resolves():
    """Each name of mixsolve.__all__ imports (they are loaded lazily on first use)."""
    import mixsolve

    for name in mixsolve.__all__:
        assert getattr(mixsolve, name) is not None, name
    with pytest.raises(AttributeError, match="no attribute 'not_a_name'"):
        mixsolve.not_a_name  # noqa: B018


def test_no_public_name_is_shadowed_by_a_submodule():
    """A submodule named like a public function would replace it once imported."""
    import mixsolve

    modules = {p.stem for p in (ROOT / "mixsolve").glob("*.py")} | {
        p.parent.name for p in (ROOT / "mixsolve").glob("*/__init__.py")}
    assert not modules & set(mixsolve.__all__)


def test_shipped_equation_sets_are_package_data():
    """Every shipped equations file exists and matches the package-data glob (installs)."""
    from fnmatch import fnmatch

    from mixsolve.io.equations_io import SHIPPED, shipped_path

    globs = _pyproject()["tool"]["setuptools"]["package-data"]["mixsolve.equations"]
    for name, file in SHIPPED.items():
        assert shipped_path(name).is_file(), name
        assert any(fnmatch(f"published/{file}", g) for g in globs), file
