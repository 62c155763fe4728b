"""Parameter constraints, declared once and checked the same way everywhere,
in the manner of scikit-learn's ``Interval`` and ``StrOptions``
(``sklearn.utils._param_validation``): an estimator lists its constraints in
``_parameter_constraints`` and ``validate_params`` checks them in ``fit``; a
function checks one value with ``Interval.check``. The message is one form for
all: ``coverage must be between 0.5 and 0.95, got 2``.
"""

from __future__ import annotations

import inspect
import math
from collections.abc import Mapping
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Any, Literal

from models.errors import InputError

Closed = Literal["both", "left", "right", "neither"]


def _num(x: float) -> str:
    return f"{x:g}" if isinstance(x, float) else str(x)


@dataclass(frozen=True, slots=True)
class Interval:
    """Numbers of one kind (``int`` or ``float``) from ``left`` to ``right``
    (None: unbounded), with ``closed`` saying which ends belong."""

    kind: type
    left: float | None
    right: float | None
    closed: Closed = "both"

    def __contains__(self, value: object) -> bool:
        if isinstance(value, bool) or not isinstance(value, Integral if self.kind is int else Real):
            return False
        v = float(value)
        if math.isnan(v):
            return False
        lo, hi = self.left, self.right
        below = lo is not None and (v < lo or (v == lo and self.closed in ("right", "neither")))
        above = hi is not None and (v > hi or (v == hi and self.closed in ("left", "neither")))
        return not (below or above)

    def describe(self) -> str:
        """The range in words: 'between 1 and 8', 'at least 1', 'in (0, 1]'."""
        lo, hi = self.left, self.right
        if lo is not None and hi is not None:
            if self.closed == "both":
                return f"between {_num(lo)} and {_num(hi)}"
            opening = "[" if self.closed == "left" else "("
            closing = "]" if self.closed == "right" else ")"
            return f"in {opening}{_num(lo)}, {_num(hi)}{closing}"
        if lo is not None:
            return f"at least {_num(lo)}" if self.closed in ("both", "left") else f"greater than {_num(lo)}"
        if hi is not None:
            return f"at most {_num(hi)}" if self.closed in ("both", "right") else f"less than {_num(hi)}"
        return "a number"

    def check(self, value: Any, name: str, *, field: str | None = None) -> Any:
        """``value`` if it lies in the interval, else a clear InputError."""
        if value in self:
            return value
        said = self.describe()
        number = isinstance(value, Integral if self.kind is int else Real) and not isinstance(value, bool)
        if not number or math.isnan(float(value)):
            # Not a number of the right kind at all (NaN, text, 1.5 for a count): say what is.
            said = ("a whole number " if self.kind is int else "a number ") + said
        raise InputError(f"{name} must be {said}, got {value!r}", field=field or name, value=value)


@dataclass(frozen=True, slots=True)
class StrOptions:
    """One of a fixed set of strings."""

    options: frozenset[str]

    def __contains__(self, value: object) -> bool:
        return isinstance(value, str) and value in self.options

    def check(self, value: Any, name: str, *, field: str | None = None) -> Any:
        if value in self:
            return value
        raise InputError(
            f"{name} must be one of {', '.join(sorted(self.options))}, got {value!r}",
            field=field or name,
            value=value,
        )


Constraint = Interval | StrOptions


def validate_params(params: Mapping[str, Any], constraints: Mapping[str, Constraint]) -> None:
    """Check each parameter named in ``constraints`` (an estimator's
    ``_parameter_constraints``) against its constraint."""
    for name, constraint in constraints.items():
        constraint.check(params[name], name)


#: Probabilities and fractions that cannot be 0 or 1 (alpha, confidence levels).
OPEN_UNIT = Interval(float, 0.0, 1.0, closed="neither")
AT_LEAST_ONE = Interval(int, 1, None)


def _plain(value: Any) -> Any:
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    item = getattr(value, "item", None)  # numpy scalars
    return item() if callable(item) else value


class ParamsMixin:
    """``get_params`` read from the constructor's keyword-only parameters, as
    scikit-learn's ``BaseEstimator.get_params`` reads them from ``__init__``'s
    signature; values in plain Python types, so a config can hold them."""

    def get_params(self) -> dict[str, Any]:
        sig = inspect.signature(type(self).__init__)
        names = [p.name for p in sig.parameters.values() if p.kind is inspect.Parameter.KEYWORD_ONLY]
        return {n: _plain(getattr(self, n)) for n in names}
