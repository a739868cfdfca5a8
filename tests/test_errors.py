"""Every error lincomb raises derives from ``lincomb.errors.LincombError``.

The source of every module under ``lincomb/`` is read with ``ast`` and each ``raise`` statement's
class is resolved in its module: a class must derive from ``LincombError``; a helper that builds
the error must say so in its return annotation.  Allowed without that: a bare ``raise``,
re-raising a name caught by an enclosing ``except`` (also as ``type(exc)(...)``), and
``raise NotImplementedError`` as the whole body of a base-class method that a subclass in the
package overrides.  Anything else needs an entry with its reason in ``ALLOWED`` below.

The second half checks one rule of the library's interface: an out-of-range confidence level or
tolerance raises :class:`~lincomb.errors.ParameterError` at every public entry point.
"""

from __future__ import annotations

import ast
import builtins
import importlib
import typing
from collections.abc import Callable, Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import lincomb as lc
from lincomb.errors import LincombError, ParameterError

PACKAGE = Path(lc.__file__).resolve().parent

BUILTIN_EXCEPTIONS = {
    name
    for name, obj in vars(builtins).items()
    if isinstance(obj, type) and issubclass(obj, BaseException)
}

#: ``(module, enclosing function qualname, raised expression) -> reason``.  Empty today: add an
#: entry only with a reason a reviewer can check.
ALLOWED: dict[tuple[str, str, str], str] = {}


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _is_stub(func: ast.FunctionDef | ast.AsyncFunctionDef) -> bool:
    """A body of an optional docstring and ``raise NotImplementedError`` only."""
    body = list(func.body)
    if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
        body = body[1:]
    if len(body) != 1 or not isinstance(body[0], ast.Raise) or body[0].exc is None:
        return False
    exc = body[0].exc
    target = exc.func if isinstance(exc, ast.Call) else exc
    return isinstance(target, ast.Name) and target.id == "NotImplementedError"


def _overridden(tree: ast.Module, cls: str, method: str) -> bool:
    """Some class of the package that names ``cls`` as a base defines ``method``."""
    trees = [tree] + [ast.parse(p.read_text(encoding="utf-8")) for p in PACKAGE.rglob("*.py")]
    for t in trees:
        for node in ast.walk(t):
            if isinstance(node, ast.ClassDef) and any(
                (isinstance(b, ast.Name) and b.id == cls)
                or (isinstance(b, ast.Attribute) and b.attr == cls)
                for b in node.bases
            ):
                if any(
                    isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef)) and f.name == method
                    for f in node.body
                ):
                    return True
    return False


def _walk(
    node: ast.AST, scope: tuple[str, ...], caught: frozenset[str]
) -> Iterator[tuple[ast.Raise, tuple[str, ...], frozenset[str]]]:
    """Each ``raise`` with its enclosing qualname and the names bound by enclosing ``except``."""
    for child in ast.iter_child_nodes(node):
        if isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            yield from _walk(child, (*scope, child.name), frozenset())
        elif isinstance(child, ast.ExceptHandler):
            inner = caught | {child.name} if child.name else caught
            yield from _walk(child, scope, inner)
        else:
            if isinstance(child, ast.Raise):
                yield child, scope, caught
            yield from _walk(child, scope, caught)


def _resolve(expr: ast.expr, scope: tuple[str, ...], namespace: dict[str, object]) -> object:
    """The object an exception expression's callee names, looked up in its module."""
    if (
        isinstance(expr, ast.Attribute)
        and isinstance(expr.value, ast.Name)
        and expr.value.id in ("self", "cls")
    ):
        owner: object = namespace[scope[0]]
        for part in scope[1:-1]:
            owner = getattr(owner, part)
        return getattr(owner, expr.attr)
    return eval(compile(ast.Expression(expr), "<raise>", "eval"), namespace)  # noqa: S307


def _derives_from_lincomb(obj: object, namespace: dict[str, object]) -> bool:
    if isinstance(obj, type):
        return issubclass(obj, LincombError)
    if callable(obj):  # a helper that builds the error: judged by its return annotation
        hint = typing.get_type_hints(obj, globalns=namespace).get("return")
        return isinstance(hint, type) and issubclass(hint, LincombError)
    return False


def violations(tree: ast.Module, namespace: dict[str, object], module: str) -> list[str]:
    """Every raise in ``tree`` whose class is not a LincombError, and why."""
    stubs = {
        (cls.name, f.name)
        for cls in ast.walk(tree)
        if isinstance(cls, ast.ClassDef)
        for f in cls.body
        if isinstance(f, (ast.FunctionDef, ast.AsyncFunctionDef)) and _is_stub(f)
    }
    bad = []
    for node, scope, caught in _walk(tree, (), frozenset()):
        exc = node.exc
        if exc is None:
            continue  # bare re-raise
        if isinstance(exc, ast.Name) and exc.id in caught:
            continue  # re-raising the caught exception
        callee = exc.func if isinstance(exc, ast.Call) else exc
        if (
            isinstance(callee, ast.Call)
            and isinstance(callee.func, ast.Name)
            and callee.func.id == "type"
            and len(callee.args) == 1
            and isinstance(callee.args[0], ast.Name)
            and callee.args[0].id in caught
        ):
            continue  # the caught exception's own class, with more context
        text = ast.unparse(callee)
        where = f"{module}:{node.lineno} in {'.'.join(scope) or '<module>'}: raise {text}"
        if (module, ".".join(scope), text) in ALLOWED:
            continue
        if text == "NotImplementedError" and len(scope) >= 2 and tuple(scope[-2:]) in stubs:
            if _overridden(tree, scope[-2], scope[-1]):
                continue
            bad.append(f"{where} (a stub that no subclass overrides)")
            continue
        if isinstance(callee, ast.Name) and callee.id in BUILTIN_EXCEPTIONS:
            bad.append(f"{where} (a built-in exception)")
            continue
        try:
            obj = _resolve(callee, scope, namespace)
        except Exception as err:  # noqa: BLE001 - reported as a failure below
            bad.append(f"{where} (cannot resolve it: {err!r})")
            continue
        if not _derives_from_lincomb(obj, namespace):
            bad.append(f"{where} (not a LincombError)")
    return bad


def _package_files() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def test_the_walk_sees_the_raises():
    trees = [ast.parse(p.read_text(encoding="utf-8")) for p in _package_files()]
    count = sum(isinstance(n, ast.Raise) for t in trees for n in ast.walk(t))
    assert count > 300  # about 350 when written


@pytest.mark.parametrize("path", _package_files(), ids=lambda p: _module_name(p))
def test_every_raise_is_a_lincomb_error(path: Path):
    module = _module_name(path)
    namespace = vars(importlib.import_module(module))
    bad = violations(ast.parse(path.read_text(encoding="utf-8")), namespace, module)
    assert not bad, "raise a class derived from lincomb.errors.LincombError:\n" + "\n".join(bad)


class _Base:
    def method(self) -> None:
        raise NotImplementedError


class _Orphan:
    def method(self) -> None:
        raise NotImplementedError


def _make_error() -> ParameterError:
    return ParameterError("x")


def _untyped_make_error():  # type: ignore[no-untyped-def]  # noqa: ANN202
    return ValueError("x")


@pytest.mark.parametrize(
    ("source", "flagged"),
    [
        ("def f():\n    raise ValueError('x')\n", True),
        ("def f():\n    raise TypeError\n", True),
        ("def f():\n    raise np.linalg.LinAlgError('x')\n", True),
        ("def f():\n    raise RuntimeError('bug')\n", True),
        ("def f():\n    raise _untyped_make_error()\n", True),
        ("class _Orphan:\n    def method(self):\n        raise NotImplementedError\n", True),
        ("def f():\n    raise ParameterError('x')\n", False),
        ("def f():\n    raise _make_error()\n", False),
        ("def f():\n    try:\n        g()\n    except ValueError:\n        raise\n", False),
        ("def f():\n    try:\n        g()\n    except ValueError as e:\n        raise e\n", False),
        (
            "def f():\n    try:\n        g()\n    except ValueError as e:\n"
            "        raise type(e)('more') from e\n",
            False,
        ),
        (
            "class _Base:\n    def method(self):\n        raise NotImplementedError\n"
            "class Child(_Base):\n    def method(self):\n        return None\n",
            False,
        ),
    ],
)
def test_the_check_can_fail(source: str, flagged: bool):
    # the checker must tell a built-in or foreign exception from a LincombError
    namespace: dict[str, object] = {
        "np": np,
        "ParameterError": ParameterError,
        "_make_error": _make_error,
        "_untyped_make_error": _untyped_make_error,
        "_Base": _Base,
        "_Orphan": _Orphan,
    }
    assert bool(violations(ast.parse(source), namespace, "fake")) is flagged


# -- out-of-range levels and tolerances: one error everywhere ---------------------------------
def _fit() -> lc.LinearFit:
    return lc.fit("fill_g ~ line", lc.datasets.fill_lines())


def _pattern() -> pd.DataFrame:
    return pd.DataFrame({"g": ["a", "b", "c"]})


ENTRY_POINTS: dict[str, Callable[[float], object]] = {
    "LinearFit.coef_frame(level)": lambda v: _fit().coef_frame(v),
    "WaldTest.intervals(level)": lambda v: _fit().wald(lc.term("line") == 0).intervals(v),
    "WaldTest.simultaneous(level)": lambda v: (
        _fit().wald(lc.term("line") == 0).simultaneous("bonferroni", v)
    ),
    "WaldBatch.row_frame(level)": lambda v: (
        _fit()
        .wald_batch([lc.coef("line[T.L2]") == 0, lc.coef("line[T.L3]") == 0])
        .row_frame(level=v)
    ),
    "plot.intervals(level)": lambda v: lc.plot.intervals(
        _fit().wald(lc.term("line") == 0), level=v
    ),
    "fit(rank_tol)": lambda v: lc.fit("fill_g ~ line", lc.datasets.fill_lines(), rank_tol=v),
    "fit_arrays(rank_tol)": lambda v: lc.fit_arrays(
        np.c_[np.ones(4), [0.0, 1, 2, 3]], [1.0, 2.0, 2.5, 4.0], rank_tol=v
    ),
    "planned_design(rank_tol)": lambda v: lc.planned_design("g", _pattern(), rank_tol=v),
    "fit_many(rank_tol)": lambda v: lc.fit_many(
        "line", lc.datasets.fill_lines(), ["fill_g"], rank_tol=v
    ),
    "fit_many_arrays(rank_tol)": lambda v: lc.fit_many_arrays(
        np.c_[np.ones(4), [0.0, 1, 2, 3]], np.c_[[1.0, 2, 2.5, 4], [1.0, 3, 2, 5]], rank_tol=v
    ),
    "fit_chunks(rank_tol)": lambda v: lc.fit_chunks(
        "fill_g ~ line", [lc.datasets.fill_lines()], rank_tol=v
    ),
    "fit_array_chunks(rank_tol)": lambda v: lc.fit_array_chunks(
        [(np.c_[np.ones(4), [0.0, 1, 2, 3]], np.array([1.0, 2, 2.5, 4]))], rank_tol=v
    ),
    "combine(rank_tol)": lambda v: lc.combine([_fit()], rank_tol=v),
    "WaldTest.row_frame(level)": lambda v: _fit().wald(lc.term("line") == 0).row_frame(level=v),
    "WaldTest.adjust(tol)": lambda v: _fit().wald(lc.term("line") == 0).adjust("max-t", tol=v),
    "WaldTest.simultaneous(tol)": lambda v: (
        _fit().wald(lc.term("line") == 0).simultaneous("max-t", tol=v)
    ),
    "ManyFit.screen(level)": lambda v: lc.fit_many(
        "line", lc.datasets.fill_lines(), ["fill_g"]
    ).screen(lc.term("line") == 0, level=v),
    "ManyWaldTest.intervals(level)": lambda v: (
        lc.fit_many("line", lc.datasets.fill_lines(), ["fill_g"])
        .wald(lc.term("line") == 0)
        .intervals(v)
    ),
    "adjust_pvalues(rate)": lambda v: lc.adjust_pvalues([0.01, 0.2], "bh", rate=v),
}


@pytest.mark.parametrize("value", [0.0, 1.0, -0.5, 95.0, float("nan")])
@pytest.mark.parametrize("entry", sorted(ENTRY_POINTS))
def test_out_of_range_levels_and_tolerances_raise_parameter_error(entry: str, value: float):
    import matplotlib

    matplotlib.use("Agg")
    with pytest.raises(ParameterError, match=r"must be in \(0, (1|0\.5)\), got"):
        ENTRY_POINTS[entry](value)
