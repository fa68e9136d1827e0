"""The one validation helper for stack and study files: tables, numbers, whole numbers, flags.

Every table of a stack or study file goes through :func:`table` (unknown keys are an
error naming the allowed ones) and every value through :func:`number`, :func:`whole`,
:func:`flag` or :func:`choice`, so that one kind of mistake gives one kind of message:
the file, the layer (counted from 1, with its name), the key and the allowed range, as
one :class:`~wellwright.physics.errors.InputError`. A TOML integer too large for a float,
a NaN or an infinity is an error here, never a traceback later.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Collection, Mapping
from typing import Any

from .errors import InputError

__all__ = ["SEED_MAX", "show", "table", "number", "whole", "flag", "choice", "text", "seed"]

#: Largest seed accepted anywhere (numpy and Optuna take seeds below 2**32).
SEED_MAX = 2**32 - 1


def show(value: Any) -> str:
    """``repr(value)`` shortened for a one-line message (a TOML integer may have 4000 digits)."""
    try:
        text = repr(value)
    except ValueError:  # an int past Python's digit limit for str()
        text = "<a very long number>"
    return text if len(text) <= 40 else f"{text[:30]}...({len(text)} characters)"


def _where(kw: Mapping[str, Any]) -> dict[str, Any]:
    return {k: kw.get(k) for k in ("source", "key", "layer", "layer_name")}


def table(value: Any, allowed: Collection[str], *, hint: str = "", **where: Any) -> dict[str, Any]:
    """``value`` as a table holding only ``allowed`` keys.

    ``where`` (``source``, ``key``, ``layer``, ``layer_name``) locates the table; an
    unknown key is reported as ``key.unknown``. ``hint`` is appended to the message.

    Parameters
    ----------
    value
        The parsed table (a dictionary is expected).
    allowed
        The keys it may hold.
    hint
        Text appended to the message on an unknown key.
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    key = where.get("key")
    if not isinstance(value, dict):
        raise InputError(f"must be a table, got {show(value)}{hint}", **_where(where))
    for name in value:
        if name not in allowed:
            raise InputError(
                f"unknown key; allowed: {', '.join(allowed)}{hint}",
                **{**_where(where), "key": f"{key}.{name}" if key else str(name)},
            )
    return value


def _range_text(low: float, high: float, unit: str, open_low: bool, open_high: bool) -> str:
    text = f"{'(' if open_low else '['}{low:g}, {high:g}{')' if open_high else ']'}"
    return f"{text} {unit}" if unit else text


def number(
    value: Any,
    *,
    low: float = -math.inf,
    high: float = math.inf,
    unit: str = "",
    open_low: bool = False,
    open_high: bool = False,
    **where: Any,
) -> float:
    """``value`` as a finite float inside ``[low, high]`` (ends open on request).

    Integers are accepted (also those too large for a float: an error, not an
    OverflowError); booleans, strings and non-finite values are not.

    Parameters
    ----------
    value
        The parsed value.
    low, high
        Allowed range, in ``unit``.
    unit
        Unit shown in the message.
    open_low, open_high
        Exclude that end of the range.
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    span = _range_text(low, high, unit, open_low, open_high)
    within = f" in {span}" if math.isfinite(low) or math.isfinite(high) else ""
    # numbers.Real: int, float and numpy's scalars (np.int64 from an array); not a bool
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(f"must be a number{within}, got {show(value)}", **_where(where))
    try:
        x = float(value)
    except OverflowError:
        digits = int(int(math.trunc(value)).bit_length() * math.log10(2)) + 1  # no str() past 4300
        raise InputError(f"an integer of ~{digits} digits is too large", **_where(where)) from None
    if not math.isfinite(x):
        raise InputError(f"must be a finite number{within}, got {show(value)}", **_where(where))
    below = x <= low if open_low else x < low
    above = x >= high if open_high else x > high
    if below or above:
        raise InputError(f"{x:g} outside {span}", **_where(where))
    return x


def whole(value: Any, *, low: int, high: int, **where: Any) -> int:
    """``value`` as a whole number in ``[low, high]`` (a float such as 3.0 is not accepted).

    Parameters
    ----------
    value
        The parsed value.
    low, high
        Allowed range, both ends included.
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
        raise InputError(
            f"must be a whole number in [{low}, {high}], got {show(value)}", **_where(where)
        )
    return int(value)


def seed(value: Any, **where: Any) -> int:
    """A seed: a whole number in ``[0, SEED_MAX]``.

    Parameters
    ----------
    value
        The parsed value.
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    return whole(value, low=0, high=SEED_MAX, **where)


def flag(value: Any, **where: Any) -> bool:
    """``value`` as ``true`` or ``false``.

    Parameters
    ----------
    value
        The parsed value.
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    if not isinstance(value, bool):
        raise InputError(f"must be true or false, got {show(value)}", **_where(where))
    return value


def choice(value: Any, allowed: Collection[str], **where: Any) -> str:
    """``value`` as one of the strings ``allowed``.

    Parameters
    ----------
    value
        The parsed value.
    allowed
        The accepted strings (listed in the message).
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    if not isinstance(value, str) or value not in allowed:
        raise InputError(f"{show(value)} is not one of {', '.join(allowed)}", **_where(where))
    return value


def text(value: Any, **where: Any) -> str:
    """``value`` as a non-empty string.

    Parameters
    ----------
    value
        The parsed value.
    **where
        Location named in the error message: ``source``, ``key``, ``layer`` (from 0) and
        ``layer_name``, as :class:`physics.errors.InputError` takes them.
    """
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"must be a non-empty string, got {show(value)}", **_where(where))
    return value
