"""The public API of ``import mixsolve``: one list, said three ways that must agree.

``mixsolve/__init__.py`` maps each public name to the module that defines it (``_LAZY``,
read at run time), imports the same names under ``TYPE_CHECKING`` (for type checkers and
IDEs) and lists them in ``__all__`` (for linters and ``from mixsolve import *``). The file is
read with :mod:`ast`, so a name left out of one of the three fails here.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
from helpers_imports import numerical_imports

import mixsolve

INIT = Path(mixsolve.__file__)
#: Names defined by ``__init__.py`` itself or imported eagerly (cheap modules only).
EAGER = {"InputError", "MixsolveError", "MixsolveWarning", "__version__"}


def type_checking_imports() -> dict[str, str]:
    """``name -> module`` of every import under ``if TYPE_CHECKING:`` in ``__init__.py``."""
    tree = ast.parse(INIT.read_text(encoding="utf-8"))
    blocks = [node for node in tree.body if isinstance(node, ast.If)
              and isinstance(node.test, ast.Name) and node.test.id == "TYPE_CHECKING"]
    assert len(blocks) == 1
    imports: dict[str, str] = {}
    for node in blocks[0].body:
        assert isinstance(node, ast.ImportFrom) and node.level == 0, ast.dump(node)
        for alias in node.names:
            assert alias.asname is None, alias.name
            assert alias.name not in imports, f"{alias.name} imported twice"
            imports[alias.name] = node.module
    return imports


def literal_all() -> list[str]:
    """``__all__`` as written in ``__init__.py`` (a literal list, which linters read)."""
    tree = ast.parse(INIT.read_text(encoding="utf-8"))
    for node in tree.body:
        if isinstance(node, ast.Assign) and [t.id for t in node.targets
                                             if isinstance(t, ast.Name)] == ["__all__"]:
            return ast.literal_eval(node.value)
    raise AssertionError("no __all__ = [...] in mixsolve/__init__.py")


def test_every_type_checking_import_is_lazy_from_the_same_module():
    assert type_checking_imports() == mixsolve._LAZY


def test_all_lists_the_lazy_names_and_the_eager_ones_once():
    names = literal_all()
    assert names == mixsolve.__all__
    assert len(set(names)) == len(names)
    assert names == sorted(names)
    assert set(names) == set(mixsolve._LAZY) | EAGER


@pytest.mark.parametrize("name", mixsolve.__all__)
def test_every_public_name_resolves_from_the_module_that_defines_it(name):
    value = getattr(mixsolve, name)
    if name in mixsolve._LAZY:
        assert value.__module__ == mixsolve._LAZY[name]
        assert name in dir(mixsolve)


def test_an_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError, match=r"^module 'mixsolve' has no attribute 'unmixx'$"):
        mixsolve.unmixx  # noqa: B018


def test_import_mixsolve_imports_no_numerical_library():
    """The point of the lazy list: `import mixsolve` stays cheap until a name is used."""
    assert numerical_imports("import mixsolve") == []
    assert "numpy" in numerical_imports("import mixsolve\nmixsolve.read_library")
