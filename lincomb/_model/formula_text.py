"""Reading a formula's text: its two sides, the data columns it reads, formulaic's messages.

What every entry point asks of a formula before any row is encoded: whether it has a response
(:func:`require_response`), which columns of a frame it reads (parsed once per formula text and
cached), and how formulaic's parse and look-up messages are passed on (without terminal colour
codes, with a hint on column names a formula must quote).
"""

from __future__ import annotations

import functools
import re

import pandas as pd

from lincomb.errors import InputError

__all__ = ["require_response", "plain"]


def _split(formula: object) -> tuple[str, str]:
    """``(left side, right side)`` of a formula; the left side is ``""`` when there is none."""
    if not isinstance(formula, str):
        raise InputError(f"formula must be a string like 'y ~ a + b', got {formula!r}.")
    if "~" in formula:
        lhs, rhs = formula.split("~", 1)
        return lhs.strip(), rhs.strip()
    return "", formula.strip()


def require_response(formula: object) -> None:
    """Refuse a formula without a response (fits need one; designs and plans do not).

    Examples
    --------
    >>> require_response("~ x")
    Traceback (most recent call last):
    ...
    lincomb.errors.InputError: formula '~ x' has no response: write it as 'response ~ terms'.
    """
    if not isinstance(formula, str) or not _split(formula)[0]:
        raise InputError(f"formula {formula!r} has no response: write it as 'response ~ terms'.")


_ANSI = re.compile(r"\x1b\[[0-9;]*[A-Za-z]")


def plain(exc: object) -> str:
    """Text of a message passed through from formulaic, without terminal colour codes.

    Examples
    --------
    >>> plain("bad \x1b[1;31mterm\x1b[0m")
    'bad term'
    """
    return _ANSI.sub("", str(exc))


def _name_hint(frame: pd.DataFrame) -> str:
    """How to write awkward column names in a formula (added to parse and lookup errors)."""
    names = [str(c) for c in frame.columns]
    hints = []
    tick = [c for c in names if "`" in c]
    if tick:
        hints.append(
            f" Column name(s) {tick[:3]} hold a backtick, which a formula cannot quote: rename"
            " them (e.g. data.rename(columns=lambda c: c.replace('`', '_')))."
        )
    odd = [c for c in names if "`" not in c and not c.isidentifier()]
    if odd:
        hints.append(
            f" A column whose name is not a plain identifier (here e.g. {odd[:3]}) is written in"
            f" backticks: `{odd[0]}`."
        )
    return "".join(hints)


@functools.lru_cache(maxsize=256)
def _formula_variables(target: str) -> tuple[str, ...]:
    """Variables a formula reads (parsing is a pure function of the text: cached)."""
    import formulaic

    return tuple(str(v) for v in formulaic.Formula(target).required_variables)


def _required(formula: str, frame: pd.DataFrame) -> list[str]:
    """Columns of ``frame`` that ``formula`` reads."""
    lhs, rhs = _split(formula)
    target = f"{lhs} ~ {rhs}" if lhs else (rhs or "1")
    try:
        required = _formula_variables(target)
    except Exception as exc:
        raise InputError(
            f"could not parse the formula {formula!r}: {plain(exc)}" + _name_hint(frame)
        ) from None
    return sorted(v for v in required if v in frame.columns)
