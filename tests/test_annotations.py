"""No public signature hides a precise type behind a bare ``Any``.

Walks every function in ``lincomb.__all__`` and ``lincomb.plot.__all__`` and the public methods
(properties included) of every class there, and fails on a parameter or return annotated with
nothing but ``Any``.  Where ``Any`` is the honest type, ``ALLOWED`` says why.  Parameters whose
names start with an underscore (private dataclass fields in a generated ``__init__``) are not
part of the interface and are skipped.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Iterator

import lincomb as lc
import lincomb.plot

#: ``"qualified name:parameter" -> reason`` (``return`` for the return value).
ALLOWED: dict[str, str] = {
    # Dask is an optional extra; its collection classes differ between the legacy and the
    # expression-based implementations, and a scheduler is a name, a client or a callable.
    "lincomb.fit_dask:data": "a Dask DataFrame (optional extra)",
    "lincomb.fit_dask:scheduler": "whatever dask.compute accepts as a scheduler",
    "lincomb.fit_dask_arrays:x": "a Dask Array (optional extra)",
    "lincomb.fit_dask_arrays:y": "a Dask Array (optional extra)",
    "lincomb.fit_dask_arrays:weights": "a Dask Array (optional extra)",
    "lincomb.fit_dask_arrays:scheduler": "whatever dask.compute accepts as a scheduler",
    "lincomb.dask_covariance_pass:data": "a Dask DataFrame or Array (optional extra)",
    "lincomb.dask_covariance_pass:scheduler": "whatever dask.compute accepts as a scheduler",
    # values held fixed for level means: a level label of the variable's own type or a number
    "lincomb.LevelMeans.holding:values": "a level of any type, or a number",
    "lincomb.LevelContrasts.holding:values": "a level of any type, or a number",
}

_ANY = ("Any", "typing.Any")


def _members(cls: type) -> Iterator[tuple[str, Callable[..., object]]]:
    for attr, value in vars(cls).items():
        if attr.startswith("_") and attr != "__init__":
            continue
        if isinstance(value, property) and value.fget is not None:
            yield attr, value.fget
        elif isinstance(value, (classmethod, staticmethod)):
            yield attr, value.__func__
        elif inspect.isfunction(value):
            yield attr, value


def _public() -> Iterator[tuple[str, Callable[..., object]]]:
    for module in (lc, lincomb.plot):
        for name in module.__all__:
            obj = getattr(module, name)
            if inspect.isfunction(obj):
                yield f"{module.__name__}.{name}", obj
            elif inspect.isclass(obj):
                for attr, func in _members(obj):
                    yield f"{module.__name__}.{name}.{attr}", func


def bare_any(name: str, func: Callable[..., object]) -> list[str]:
    """``name:parameter`` for each parameter (or ``return``) annotated with a bare Any."""
    sig = inspect.signature(func)
    found = [
        f"{name}:{p.name}"
        for p in sig.parameters.values()
        if not p.name.startswith("_") and p.annotation in _ANY
    ]
    if sig.return_annotation in _ANY:
        found.append(f"{name}:return")
    return found


def test_the_walk_finds_functions_and_methods():
    names = {name for name, _ in _public()}
    assert {"lincomb.fit", "lincomb.LinearFit.wald", "lincomb.plot.intervals"} <= names


def test_no_public_signature_exposes_a_bare_any():
    found = [hit for name, func in _public() for hit in bare_any(name, func)]
    unexplained = [hit for hit in found if hit not in ALLOWED]
    assert not unexplained, f"annotate these with their real types (or explain): {unexplained}"


def test_the_allow_list_names_only_what_exists():
    found = {hit for name, func in _public() for hit in bare_any(name, func)}
    assert set(ALLOWED) <= found, f"stale entries: {sorted(set(ALLOWED) - found)}"


def test_the_check_can_fail():
    from typing import Any

    def loose(x: Any, y: int) -> Any:
        return x

    def tight(x: int, *, _private: Any = None) -> int:
        return x

    assert bare_any("loose", loose) == ["loose:x", "loose:return"]
    assert bare_any("tight", tight) == []
