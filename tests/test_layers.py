"""Import direction between lincomb's layers, read from the source with ``ast``.

The numerical core (``lincomb/_core/``) works on arrays only: it may import numpy, scipy and
the standard library, and of lincomb only ``lincomb._core`` itself, ``lincomb.errors``,
``lincomb._settings``, ``lincomb._docstrings`` (shared docstring text; it imports only the
errors) and ``lincomb._typing`` (the array type names; it imports only numpy).  It never
imports pandas or formulaic.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "lincomb"
CORE = PACKAGE / "_core"

_CORE_FORBIDDEN_TOP = {"pandas", "formulaic"}
_CORE_ALLOWED_LINCOMB = (
    "lincomb._core",
    "lincomb.errors",
    "lincomb._settings",
    "lincomb._docstrings",
    "lincomb._typing",
)


def _module_name(path: Path, root: Path) -> str:
    parts = path.relative_to(root.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path, root: Path = PACKAGE) -> list[tuple[int, str]]:
    """Every module a file imports (absolute names; relative imports resolved), with lines.

    ``from a import b`` yields both ``a`` and ``a.b`` (``b`` may be a submodule), so
    ``from lincomb import _fit`` is caught as ``lincomb._fit``.
    """
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = _module_name(path, root)
    if path.name != "__init__.py":
        package = package.rpartition(".")[0]
    found: list[tuple[int, str]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")
                anchor = anchor[: len(anchor) - (node.level - 1)]
                base = ".".join([*anchor, base] if base else anchor)
            found.append((node.lineno, base))
            found += [(node.lineno, f"{base}.{alias.name}") for alias in node.names]
    return found


def _core_violation(name: str) -> bool:
    top = name.split(".")[0]
    if top in _CORE_FORBIDDEN_TOP:
        return True
    if top != "lincomb":
        return False
    if name == "lincomb":  # `from lincomb import x`: judged by the `lincomb.x` entry
        return False
    return not any(name == ok or name.startswith(ok + ".") for ok in _CORE_ALLOWED_LINCOMB)


def _core_files() -> list[Path]:
    return sorted(CORE.rglob("*.py"))


def test_the_core_has_modules_to_check():
    names = {p.stem for p in _core_files()}
    assert {"__init__", "moments", "merge", "solve"} <= names


@pytest.mark.parametrize("path", _core_files(), ids=lambda p: p.name)
def test_core_imports_only_arrays_errors_and_settings(path):
    bad = [f"line {line}: {name}" for line, name in _imports(path) if _core_violation(name)]
    assert not bad, f"{path.relative_to(PACKAGE.parent)} imports outside its layer: {bad}"


@pytest.mark.parametrize(
    ("source", "bad"),
    [
        ("import pandas as pd", True),
        ("from formulaic import model_matrix", True),
        ("from lincomb._fit import linear", True),
        ("from lincomb import _fit", True),
        ("import lincomb._model.design", True),
        ("from .. import _results", True),
        ("from lincomb.errors import InputError", False),
        ("from lincomb._settings import blas_limit", False),
        ("from lincomb._core.solve import Solution", False),
        ("from . import solve", False),
        ("import numpy as np", False),
    ],
)
def test_the_check_itself_tells_allowed_from_forbidden(tmp_path, source, bad):
    # the checker must be able to fail: feed it one import line in a fake core module
    fake_pkg = tmp_path / "lincomb" / "_core"
    fake_pkg.mkdir(parents=True)
    f = fake_pkg / "fake.py"
    f.write_text(source + "\n", encoding="utf-8")
    found = any(_core_violation(name) for _, name in _imports(f, tmp_path / "lincomb"))
    assert found is bad


# -- the builder and the model layer -------------------------------------------------------------
# The builder writes restrictions and level-mean recipes and knows no linear algebra; the model
# layer (the formula encoder and the design) knows only itself.  Imports under
# ``if TYPE_CHECKING:`` are annotations, not dependencies, and are not counted.
LAYER_ALLOWED = {
    "_builder": ("lincomb._builder", "lincomb.errors", "lincomb._typing"),
    "_model": ("lincomb._model", "lincomb.errors", "lincomb._typing"),
}


def _runtime_imports(path: Path, root: Path = PACKAGE) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    skipped: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            for child in node.body:
                skipped.update(range(child.lineno, (child.end_lineno or child.lineno) + 1))
    return [(line, name) for line, name in _imports(path, root) if line not in skipped]


def _layer_violation(name: str, allowed: tuple[str, ...]) -> bool:
    if name.split(".")[0] != "lincomb" or name == "lincomb":
        return False
    return not any(name == ok or name.startswith(ok + ".") for ok in allowed)


def _layer_files() -> list[tuple[str, Path]]:
    return [(layer, p) for layer in LAYER_ALLOWED for p in sorted((PACKAGE / layer).rglob("*.py"))]


@pytest.mark.parametrize(
    ("layer", "path"), _layer_files(), ids=lambda v: v if isinstance(v, str) else v.name
)
def test_builder_and_model_import_only_their_own_layer(layer, path):
    allowed = LAYER_ALLOWED[layer]
    bad = [
        f"line {line}: {name}"
        for line, name in _runtime_imports(path)
        if _layer_violation(name, allowed)
    ]
    assert not bad, f"{path.relative_to(PACKAGE.parent)} imports outside its layer: {bad}"


@pytest.mark.parametrize(
    ("source", "bad"),
    [
        ("from lincomb._core import solve", True),
        ("from lincomb._fit.linear import LinearFit", True),
        ("if TYPE_CHECKING:\n    from lincomb._fit.linear import LinearFit", False),
        ("from lincomb._builder.restriction import coef", False),
        ("from lincomb.errors import ContrastError", False),
    ],
)
def test_the_layer_check_can_fail(tmp_path, source, bad):
    fake_pkg = tmp_path / "lincomb" / "_builder"
    fake_pkg.mkdir(parents=True)
    f = fake_pkg / "fake.py"
    f.write_text(source + "\n", encoding="utf-8")
    allowed = LAYER_ALLOWED["_builder"]
    found = any(_layer_violation(n, allowed) for _, n in _runtime_imports(f, tmp_path / "lincomb"))
    assert found is bad


def test_the_docstring_helper_stays_a_leaf():
    # the core may import lincomb._docstrings only because it imports nothing else of lincomb
    path = PACKAGE / "_docstrings.py"
    names = [name for _, name in _imports(path) if name.split(".")[0] == "lincomb"]
    assert names, "the helper imports its errors"
    bad = [n for n in names if not (n == "lincomb.errors" or n.startswith("lincomb.errors."))]
    assert not bad, f"lincomb/_docstrings.py imports more of lincomb than its errors: {bad}"


def test_the_array_type_module_stays_a_leaf():
    # every layer may import lincomb._typing only because it imports nothing of lincomb
    # and no pandas or formulaic
    path = PACKAGE / "_typing.py"
    names = [name for _, name in _imports(path)]
    assert "numpy" in {n.split(".")[0] for n in names}, "the module defines numpy array types"
    bad = [n for n in names if n.split(".")[0] in {"lincomb", "pandas", "formulaic"}]
    assert not bad, f"lincomb/_typing.py imports {bad}"
