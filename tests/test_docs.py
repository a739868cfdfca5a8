"""The documentation runs: README's code, and an Examples section on every public object.

The Examples themselves are executed by pytest's ``--doctest-modules`` over ``lincomb/``; this
file checks that none is missing, so a new public function, class or method cannot land without
one, and runs the README's Python blocks in order (they are the first thing a user copies).
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import re
import subprocess
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import pytest  # noqa: E402

import lincomb  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def _public_modules() -> list[str]:
    names = ["lincomb"]
    for info in pkgutil.walk_packages(lincomb.__path__, "lincomb."):
        if not any(part.startswith("_") for part in info.name.split(".")[1:]):
            names.append(info.name)
    return names


def _public_objects() -> list[tuple[str, object]]:
    """Public functions, classes and methods defined in lincomb's public modules.

    Public means: listed in a public module's ``__all__`` (or, without one, not starting with
    an underscore) and defined inside lincomb (the top-level package re-exports what its
    private layers define); for classes, their own methods not starting with an underscore.
    Properties are attributes and are not required to carry examples; a method without a
    docstring of its own inherits its base class's (as ``inspect.getdoc`` does).
    """
    found = []
    seen: set[int] = set()
    for modname in _public_modules():
        mod = importlib.import_module(modname)
        names = getattr(mod, "__all__", [n for n in vars(mod) if not n.startswith("_")])
        for name in names:
            obj = getattr(mod, name, None)
            home = getattr(obj, "__module__", None) or ""
            if home != modname and not (hasattr(mod, "__all__") and home.startswith("lincomb.")):
                continue
            if id(obj) in seen:
                continue
            seen.add(id(obj))
            if inspect.isclass(obj):
                found.append((f"{modname}.{name}", obj))
                for attr, value in vars(obj).items():
                    if attr.startswith("_") or isinstance(value, property):
                        continue
                    if isinstance(value, (classmethod, staticmethod)):
                        value = value.__func__
                    if inspect.isfunction(value):
                        found.append((f"{modname}.{name}.{attr}", getattr(obj, attr)))
            elif inspect.isfunction(obj):
                found.append((f"{modname}.{name}", obj))
    return found


def test_the_walk_finds_the_main_entry_points():
    names = {name for name, _ in _public_objects()}
    assert {"lincomb.fit", "lincomb.WaldTest.plot", "lincomb.plot.intervals"} <= names
    assert len(names) > 100


def test_every_public_object_has_a_docstring_with_examples():
    missing = [
        name
        for name, obj in _public_objects()
        if not re.search(r"^\s*Examples\n\s*-+\n", inspect.getdoc(obj) or "", re.M)
    ]
    assert not missing, (
        "public objects without a numpydoc 'Examples' section (add one that runs under"
        f" doctest): {missing}"
    )


def _readme_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```python\n(.*?)```", text, re.S)


def test_readme_keeps_its_set_up_commands_and_cautions():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert "python -m pip install . && python -m lincomb.demo" in text
    assert 'python -m pip install ".[test]" && python -m pytest' in text
    assert "## Cautions" in text


@pytest.mark.filterwarnings("ignore::lincomb.errors.LincombWarning")
def test_readme_python_blocks_run_in_order(tmp_path, monkeypatch):
    blocks = _readme_blocks()
    assert len(blocks) >= 2
    monkeypatch.chdir(tmp_path)  # the tour saves a picture
    namespace: dict[str, object] = {}
    for i, block in enumerate(blocks):
        exec(compile(block, f"README.md python block {i}", "exec"), namespace)  # noqa: S102
    assert (tmp_path / "planning.png").stat().st_size > 0


def _all_docstrings() -> list[tuple[str, str]]:
    """``(qualified name, docstring)`` of every module, class, function and method of lincomb."""
    found = []
    mods = ["lincomb"] + [m.name for m in pkgutil.walk_packages(lincomb.__path__, "lincomb.")]
    for modname in mods:
        mod = importlib.import_module(modname)
        found.append((modname, mod.__doc__ or ""))
        for name, obj in vars(mod).items():
            if getattr(obj, "__module__", None) != modname:
                continue
            if inspect.isclass(obj):
                found.append((f"{modname}.{name}", obj.__doc__ or ""))
                for attr, value in vars(obj).items():
                    func = getattr(value, "__func__", getattr(value, "fget", value))
                    if inspect.isfunction(func):
                        found.append((f"{modname}.{name}.{attr}", func.__doc__ or ""))
            elif inspect.isfunction(obj):
                found.append((f"{modname}.{name}", obj.__doc__ or ""))
    return found


def test_no_docstring_keeps_an_unfilled_fragment_placeholder():
    # shared docstring text is filled in by lincomb._docstrings.fill_doc at import; a line
    # that still reads %(name)s is a decorator that was forgotten
    docs = _all_docstrings()
    assert len(docs) > 500
    left = [name for name, doc in docs if re.search(r"^\s*%\(\w+\)s\s*$", doc, re.M)]
    assert not left, f"docstrings with an unfilled %(name)s line (add @fill_doc): {left}"


def test_lincomb_imports_with_docstrings_stripped():
    # python -OO drops docstrings (and a dataclass then writes its own signature as __doc__):
    # filling shared docstring text must not stop the package from importing
    code = "import lincomb, lincomb.plot; assert lincomb.fit.__doc__ is None"
    run = subprocess.run([sys.executable, "-OO", "-c", code], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
