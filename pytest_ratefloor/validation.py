"""Argument validation: the one place where a user-supplied argument is checked.

Two rules hold for every public entry point:

* a value of the wrong *type* raises ``TypeError`` (``n=1.5``, ``p="0.1"``,
  ``seed=True``: a ``bool`` is never taken for a number);
* a value of the right type but outside its range raises ``ValueError``
  (``n=0``, ``p=1.5``, ``rel=nan``).

Every message has one form, ``"<name> must be <rule>, got <value>"`` (see
:func:`message`; a wrong type names the type wanted, ``"n must be an
integer, got 1.5"``, a bad value the range, ``"n must be an integer >= 1,
got 0"``),
optionally preceded by ``"<where>: "`` when the argument belongs to a named
thing (a source family, a ledger field). ``n``, ``seed``, ``trials``,
tolerances and slacks are checked without a ``where``, so the same bad value
gives the same answer through every entry point (``assert_roundtrip``,
``ratefloor.check``, ``gate``, ``Source.sample``, the corruption check, the
command line, ini keys).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Collection
from typing import TYPE_CHECKING, Any, TypeVar

if TYPE_CHECKING:  # numpy is imported only where a vector is checked (not at pytest start-up)
    import numpy as np
    from numpy.typing import ArrayLike

__all__ = [
    "PMF_SUM_TOLERANCE",
    "Described",
    "choice",
    "flag",
    "function",
    "integer",
    "message",
    "probability",
    "probability_vector",
    "real",
    "sample_size",
    "seconds",
    "seed",
    "show",
    "slack",
    "text",
    "weights",
]

#: Allowed |Σp − 1| of a probability vector.
PMF_SUM_TOLERANCE = 1e-9

_T = TypeVar("_T")


def show(value: object) -> str:
    """Render a user value for a message (numpy scalars as plain numbers)."""
    if type(value).__module__ == "numpy" and hasattr(value, "item"):
        value = value.item()  # a numpy scalar
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


class Described(str):
    """Text that a message shows as it is (``got a sum of 0.9``), not as a repr."""


def message(name: str, rule: str, value: object, where: str | None = None) -> str:
    """The one message form: ``"[<where>: ]<name> must be <rule>, got <value>"``."""
    head = f"{where}: " if where else ""
    got = value if isinstance(value, Described) else show(value)
    return f"{head}{name} must be {rule}, got {got}"


def _is_bool(value: object) -> bool:
    return isinstance(value, bool) or type(value).__name__ == "bool_"  # numpy's bool too


def _is_integer(value: object) -> bool:
    # numpy's integer types register as numbers.Integral
    return isinstance(value, numbers.Integral) and not _is_bool(value)


def _is_real(value: object) -> bool:
    return isinstance(value, numbers.Real) and not _is_bool(value)


def _bound(x: float) -> str:
    return str(x) if isinstance(x, int) else f"{x:g}"


def _range_rule(kind: str, minimum: float | None, maximum: float | None,
                low_open: bool = False, high_open: bool = False) -> str:
    if minimum is not None and maximum is not None:
        left = "(" if low_open else "["
        right = ")" if high_open else "]"
        return f"{kind} in {left}{_bound(minimum)}, {_bound(maximum)}{right}"
    if minimum is not None:
        return f"{kind} {'>' if low_open else '>='} {_bound(minimum)}"
    if maximum is not None:
        return f"{kind} {'<' if high_open else '<='} {_bound(maximum)}"
    return kind


def integer(value: object, name: str, *, minimum: int | None = None,
            maximum: int | None = None, where: str | None = None) -> int:
    """``value`` as an ``int`` within ``[minimum, maximum]``.

    :raises TypeError: not an integer (``bool`` and floats such as ``2.0`` included).
    :raises ValueError: outside the range.
    """
    if not _is_integer(value):
        raise TypeError(message(name, "an integer", value, where))
    number = int(value)  # type: ignore[call-overload]
    if (minimum is not None and number < minimum) or (maximum is not None and number > maximum):
        raise ValueError(message(name, _range_rule("an integer", minimum, maximum), value, where))
    return number


def sample_size(value: object, name: str = "n", *, minimum: int = 1) -> int:
    """A number of symbols (``n``): an integer ``>= minimum`` (1 for checks, 0 for sampling)."""
    return integer(value, name, minimum=minimum)


def seed(value: object, name: str = "seed") -> int:
    """A sampling seed: an integer ``>= 0``."""
    return integer(value, name, minimum=0)


def real(value: object, name: str, *, minimum: float | None = None,
         maximum: float | None = None, low_open: bool = False, high_open: bool = False,
         finite: bool = True, where: str | None = None) -> float:
    """``value`` as a ``float`` (``-0.0`` becomes ``0.0``), NaN always rejected.

    :raises TypeError: not a real number (``bool`` and strings included).
    :raises ValueError: NaN, infinite (when ``finite``), or outside the range.
    """
    kind = "a finite number" if finite else "a number"
    rule = _range_rule(kind, minimum, maximum, low_open, high_open)
    if not _is_real(value):
        raise TypeError(message(name, "a number", value, where))
    try:
        number = float(value) + 0.0  # type: ignore[arg-type]
    except OverflowError:
        raise ValueError(message(name, rule, value, where)) from None
    bad = math.isnan(number) or (finite and math.isinf(number))
    if minimum is not None:
        bad = bad or number < minimum or (low_open and number == minimum)
    if maximum is not None:
        bad = bad or number > maximum or (high_open and number == maximum)
    if bad:
        raise ValueError(message(name, rule, value, where))
    return number


def probability(value: object, name: str = "p", *, low_open: bool = False,
                high_open: bool = False, where: str | None = None) -> float:
    """A probability in ``[0, 1]`` (either end may be open)."""
    return real(value, name, minimum=0.0, maximum=1.0, low_open=low_open,
                high_open=high_open, where=where)


def seconds(value: object, name: str = "timeout") -> float:
    """A positive, finite duration in seconds."""
    return real(value, name, minimum=0.0, low_open=True)


def slack(value: object, name: str) -> float:
    """A relative slack ``>= 0`` (a number, or numeric text from an option or ini key).

    ``name`` says where it came from (``"--ratefloor-slack"``, ``"ini key
    ratefloor_slack"``, ``"ratefloor(slack=...)"``).
    """
    rule = "a finite number >= 0 (a relative slack such as 0.01)"
    if isinstance(value, str):
        try:
            number = float(value.strip())
        except ValueError:
            raise ValueError(message(name, rule, value, None)) from None
        if not (math.isfinite(number) and number >= 0.0):
            raise ValueError(message(name, rule, value, None))
        return number + 0.0
    if not _is_real(value):
        raise TypeError(message(name, "a number", value, None))
    number = float(value)  # type: ignore[arg-type]
    if not (math.isfinite(number) and number >= 0.0):
        raise ValueError(message(name, rule, value, None))
    return number + 0.0


def flag(value: object, name: str) -> bool:
    """A ``bool`` (not a truthy stand-in such as ``1`` or ``"yes"``)."""
    if not _is_bool(value):
        raise TypeError(message(name, "True or False", value, None))
    return bool(value)


def text(value: object, name: str, *, where: str | None = None) -> str:
    """A non-empty string."""
    if not isinstance(value, str):
        raise TypeError(message(name, "a non-empty string", value, where))
    if not value.strip():
        raise ValueError(message(name, "a non-empty string", value, where))
    return value


def choice(value: object, name: str, choices: Collection[_T], *,
           where: str | None = None) -> _T:
    """One of ``choices`` (strings compared exactly)."""
    if isinstance(value, str) and value in choices:
        return value  # type: ignore[return-value]
    rule = "one of " + ", ".join(repr(c) for c in choices)
    if not isinstance(value, str):
        raise TypeError(message(name, rule, value, where))
    raise ValueError(message(name, rule, value, where))


def function(value: object, name: str) -> Any:
    """A callable."""
    if not callable(value):
        raise TypeError(message(name, "callable", value, None))
    return value


def _float_vector(values: object, name: str, what: str, where: str | None) -> np.ndarray:
    import numpy as np

    if isinstance(values, (str, bytes)):
        raise TypeError(message(name, f"a sequence of {what}", values, where))
    try:
        raw = np.asarray(values)
        if raw.dtype.kind not in "iuf":  # None, strings, bools, objects: not numbers
            raise TypeError
        arr = raw.astype(np.float64)
    except (TypeError, ValueError):
        raise TypeError(message(name, f"a sequence of {what}", values, where)) from None
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(message(name, f"a non-empty 1-D sequence of {what}",
                                  Described(f"shape {arr.shape}"), where))
    bad = np.flatnonzero(~np.isfinite(arr) | (arr < 0))
    if bad.size:
        i = int(bad[0])
        raise ValueError(message(f"{name}[{i}]", "finite and >= 0", float(arr[i]), where))
    return arr + 0.0


def probability_vector(values: ArrayLike, name: str = "probs", *,
                       where: str | None = None) -> np.ndarray:
    """A finite pmf as float64: entries finite and ``>= 0``, summing to 1 within 1e-9."""
    arr = _float_vector(values, name, "probabilities", where)
    total = math.fsum(arr.tolist())
    if abs(total - 1.0) > PMF_SUM_TOLERANCE:
        raise ValueError(message(name, f"a pmf summing to 1 within {PMF_SUM_TOLERANCE:g}",
                                  Described(f"a sum of {total!r}"), where))
    return arr


def weights(values: ArrayLike, name: str = "probs", *, where: str | None = None) -> np.ndarray:
    """Non-negative finite weights, not all zero (need not sum to 1)."""
    arr = _float_vector(values, name, "weights", where)
    if not bool((arr > 0).any()):
        raise ValueError(message(name, "weights not all zero", values, where))
    return arr
