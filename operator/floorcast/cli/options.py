"""Bounded option types for every command: a bad number is exit 2 with one line.

Click's own ``int`` and ``float`` accept a 400-digit integer, ``nan`` and ``inf``; they
then surface deep inside numpy as an ``OverflowError`` (exit 1, "internal error") or as
a multi-gigabyte allocation. Each option here carries the same bound the policy
(``policy.py``) or the HPA has, so the check happens while the command line is read.
Shared by every command (``backtest`` included), so the bounds cannot drift apart.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from datetime import timedelta
from typing import Any

import click

from floorcast.durations import format_duration, parse_duration
from floorcast.errors import InputError
from floorcast.policy import MAX_PER_REPLICA, MAX_REPLICAS


def _shown(text: str) -> str:
    return text if len(text) <= 40 else text[:37] + "..."


class BoundedInt(click.ParamType):
    """An integer in [lo, hi]; a 400-digit value is shown shortened in the error."""

    name = "integer"

    def __init__(self, lo: int, hi: int) -> None:
        self.lo, self.hi = lo, hi

    def convert(self, value: Any, param: click.Parameter | None,
                ctx: click.Context | None) -> int:  # fmt: skip
        text = str(value).strip()
        if isinstance(value, int) and not isinstance(value, bool):
            x = value
        elif len(text) <= 40 and text.lstrip("+-").isdigit():
            x = int(text)
        else:
            self.fail(f"{_shown(text)!r} is not an integer in [{self.lo}, {self.hi}]", param, ctx)
        if not self.lo <= x <= self.hi:
            self.fail(f"{_shown(text)} is not in [{self.lo}, {self.hi}]", param, ctx)
        return x


#: HPA replica counts are int32 (autoscaling/v2), as in the CRD.
REPLICAS = BoundedInt(1, MAX_REPLICAS)
PORT = BoundedInt(0, 65535)
#: kopf's extra API connections; far above any useful value, far below a file-handle limit.
CONNECTIONS = BoundedInt(1, 1024)


class BoundedFloat(click.ParamType):
    """A finite float in (lo, hi] (or [lo, hi] with ``lo_open=False``)."""

    name = "number"

    def __init__(self, lo: float, hi: float, *, lo_open: bool = True) -> None:
        self.lo, self.hi, self.lo_open = lo, hi, lo_open

    def convert(self, value: Any, param: click.Parameter | None,
                ctx: click.Context | None) -> float:  # fmt: skip
        if isinstance(value, float):
            x = value
        else:
            try:
                x = float(str(value))
            except ValueError:
                self.fail(f"{_shown(str(value))!r} is not a number", param, ctx)
        op = ">" if self.lo_open else ">="
        low_ok = x > self.lo if self.lo_open else x >= self.lo
        if not math.isfinite(x) or not low_ok or x > self.hi:
            self.fail(f"{_shown(str(value))!r} is not a finite number {op} {self.lo:g} "
                      f"and <= {self.hi:g}", param, ctx)  # fmt: skip
        return x


PER_REPLICA = BoundedFloat(0.0, MAX_PER_REPLICA)


def duration(*, minimum: timedelta | None = None, maximum: timedelta,
             allow_zero: bool = False) -> Callable[..., Any]:  # fmt: skip
    """An option callback: checks a duration's range and hands the text on unchanged,
    so the command body parses it as before."""

    def check(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
        if value is None:
            return None
        try:
            d = parse_duration(value, field=f"--{param.name}".replace("_", "-"),
                               allow_zero=allow_zero, maximum=maximum)  # fmt: skip
        except InputError as e:
            raise click.BadParameter(e.problem.split(": ", 1)[-1], ctx, param) from None
        if minimum is not None and d < minimum:
            raise click.BadParameter(f"{_shown(value)!r} is shorter than "
                                     f"{format_duration(minimum)}", ctx, param)  # fmt: skip
        return value

    return check
