"""The field readers behind ``policy.py``: one checked getter per field type, and the
bounds every field must keep.

Split from ``policy.py`` (the model and the parsing order) so that each stays readable;
``policy.py`` re-exports what callers use (``PolicyError``, the ``MAX_*`` bounds). The
bounds are the CRD's: tests/test_hardening_bounds.py and the server-side property test
in e2e/test_operator_hardening.py hold the two together.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import timedelta
from typing import Any, NoReturn, cast

import pandas as pd

from floorcast.durations import parse_duration
from floorcast.errors import InputError

#: maxLength in the CRD; every other string field allows 253 (a DNS subdomain name).
MAX_URL_LENGTH, MAX_EVENT_NAME_LENGTH = 2048, 63
#: maxLength of every duration and event time in the CRD.
MAX_DURATION_LENGTH = MAX_TIME_LENGTH = 64
#: Upper bounds, the same in the CRD (``maximum`` and CEL rules; tests/test_crd.py and
#: the server-side property test hold them together). They are far above any sensible
#: setting and low enough that no product of them can overflow planning: a week of
#: lead, hold or age; 1000 % headroom; a 1000× event; int32 replica counts as the HPA has.
MAX_DURATION = timedelta(days=7)
MAX_HEADROOM = 10.0
MAX_FACTOR = 1000.0
MAX_PER_REPLICA = 1e12
MAX_REPLICAS = 2**31 - 1
MAX_EVENTS = 100
#: liveCorrection.max at most 10: a forecast off by more than 10× is a broken
#: forecast, not a level error to correct (common practice, no source).
MAX_CORRECTION = 10.0
#: serviceLevel in [0.5, 0.999]: below the median a floor would be sized under the
#: forecast's middle, and above 0.999 a quantile is read from a tail the residual
#: sample behind it cannot resolve (common practice, no source).
MIN_SERVICE_LEVEL, MAX_SERVICE_LEVEL = 0.5, 0.999
_RFC3339 = re.compile(r"^\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d+)?([Zz]|[+-]\d{2}:\d{2})$")


class PolicyError(InputError):
    """A policy mistake; ``path`` and ``line`` let the operator put it in a condition."""

    def __init__(self, problem: str, *, source: str | None = None, path: str | None = None,
                 line: int | None = None):  # fmt: skip
        self.path = path
        self.line = line
        where = (f"line {line}: " if line is not None else "") + (f"{path}: " if path else "")
        super().__init__(where + problem, source=source)


def _describe(value: object) -> str:
    if value is None or isinstance(value, bool):
        return "null" if value is None else f"boolean {str(value).lower()}"
    if isinstance(value, int | float | str):
        return f"{'string' if isinstance(value, str) else 'number'} {value!r}"
    if isinstance(value, Mapping):
        return "a mapping"
    return "a list" if isinstance(value, list | tuple) else type(value).__name__


_M = Mapping[str, Any]
_Rule = tuple[re.Pattern[str], str]
_REQUIRED: Any = object()


@dataclass(frozen=True)
class _Reader:
    """Getters take a mapping and the field's full path (the last part is the key), so every
    check is one call; they return ``default`` for an absent or null field."""

    source: str

    def fail(self, path: str, problem: str) -> NoReturn:
        raise PolicyError(problem, source=self.source, path=path)

    def mapping(self, value: object, path: str, allowed: Sequence[str]) -> _M:
        if not isinstance(value, Mapping):
            self.fail(path, f"expected a mapping, got {_describe(value)}")
        for key in value:
            if key not in allowed:
                hint = difflib.get_close_matches(str(key), allowed, n=1)
                maybe = f" (did you mean {hint[0]!r}?)" if hint else ""
                where, fields = f"{path}.{key}".lstrip("."), ", ".join(sorted(allowed))
                self.fail(where, f"unknown field{maybe}; allowed here: {fields}")
        return cast(_M, value)

    def take(self, m: _M, path: str, default: Any = _REQUIRED) -> Any:
        value = m.get(path.rpartition(".")[2])
        if value is None and default is _REQUIRED:
            self.fail(path, "required field is missing")
        return value

    def child(self, m: _M, path: str, allowed: Sequence[str]) -> _M:
        return self.mapping(self.take(m, path), path, allowed)

    def string(self, m: _M, path: str, rule: _Rule | None = None, default: Any = _REQUIRED,
               max_length: int = 253) -> Any:  # fmt: skip
        """A non-empty string; ``max_length`` is the CRD's maxLength for the field."""
        value = self.take(m, path, default)
        if value is None:
            return default
        if not isinstance(value, str) or not value.strip():
            self.fail(path, f"expected a non-empty string, got {_describe(value)}")
        if len(value) > max_length:
            self.fail(path, f"is {len(value)} characters long; at most {max_length} allowed")
        if rule is not None and not rule[0].match(value):
            self.fail(path, f"{value!r} is not valid; expected {rule[1]}")
        return value

    def number(self, m: _M, path: str, *, above: float, maximum: float,
               inclusive: bool = False, default: Any = _REQUIRED) -> Any:  # fmt: skip
        """A number in (above, maximum] or [above, maximum]; a 400-digit integer is
        compared exactly (never converted to float first, which would overflow)."""
        value = self.take(m, path, default)
        if value is None:
            return default
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(path, f"expected a number, got {_describe(value)}")
        finite = not isinstance(value, float) or math.isfinite(value)
        if not finite or value < above or (value == above and not inclusive) or value > maximum:
            op = ">=" if inclusive else ">"
            shown = repr(value) if len(repr(value)) <= 40 else repr(value)[:37] + "..."
            self.fail(path, f"expected a finite number {op} {above:g} and <= {maximum:g}, "
                            f"got {shown}")  # fmt: skip
        return float(value)

    def integer(self, m: _M, path: str, *, minimum: int) -> int | None:
        value = self.take(m, path, None)
        if value is not None and (type(value) is not int or not minimum <= value <= MAX_REPLICAS):
            shown = _describe(value) if len(str(value)) <= 40 else "a longer number"
            self.fail(path, f"expected an integer >= {minimum} and <= {MAX_REPLICAS}, "
                            f"got {shown}")  # fmt: skip
        return value

    def boolean(self, m: _M, path: str, default: bool) -> bool:
        value = self.take(m, path, default)
        if value is not None and not isinstance(value, bool):
            self.fail(path, f"expected true or false, got {_describe(value)}")
        return default if value is None else value

    def duration(self, m: _M, path: str, *, default: timedelta, allow_zero: bool) -> timedelta:
        value = self.take(m, path, default)
        if value is None:
            return default
        if isinstance(value, str) and len(value) > MAX_DURATION_LENGTH:
            self.fail(path, f"is {len(value)} characters long; at most "
                            f"{MAX_DURATION_LENGTH} allowed")  # fmt: skip
        try:
            return parse_duration(value, field=path, allow_zero=allow_zero, days=False,
                                  maximum=MAX_DURATION)  # fmt: skip
        except InputError as e:
            self.fail(path, e.problem.removeprefix(f"{path}: "))

    def timestamp(self, m: _M, path: str) -> pd.Timestamp:
        value = self.take(m, path)
        if isinstance(value, str) and len(value) > MAX_TIME_LENGTH:
            self.fail(path, f"is {len(value)} characters long; at most {MAX_TIME_LENGTH} allowed")
        if not isinstance(value, str) or not _RFC3339.match(value):
            example = "'2025-11-28T06:00:00Z'"
            self.fail(path, f"expected an RFC 3339 time with offset such as {example}, "
                            f"got {_describe(value)}")  # fmt: skip
        try:
            return pd.Timestamp(value.upper()).tz_convert("UTC")
        except ValueError:
            self.fail(path, f"{value!r} is not a real date and time")
