"""Go-style duration strings (``90s``, ``5m``, ``1h30m``), as Kubernetes users write them.

Policies are Kubernetes objects, so their durations follow Go's ``time.ParseDuration``
syntax (the form kubectl users already know) rather than ISO 8601. We accept the units
that make sense for scheduling (ms, s, m, h) plus ``d`` and ``w`` for seasons and
look-backs, which Go lacks but Prometheus users expect.
"""

from __future__ import annotations

import re
from datetime import timedelta

from floorcast.errors import InputError

_PART = re.compile(r"(\d+(?:\.\d+)?)(ms|s|m|h|d|w)")
#: Policy durations: Go's units only, because the CRD's CEL rules check them with
#: CEL's ``duration()``, which knows Go's units and not ``d``/``w``. The CRD schema uses
#: this same pattern, so the API server and the CLI accept exactly the same strings.
DURATION_PATTERN = r"^([0-9]+(\.[0-9]+)?(ms|s|m|h))+$"
#: ``spec.leadTime`` also takes ``auto`` (the lead measured from pod start-ups).
LEAD_TIME_PATTERN = r"^(auto|([0-9]+(\.[0-9]+)?(ms|s|m|h))+)$"
_GO_UNITS = ("ms", "s", "m", "h")


#: Nanoseconds per unit, as Go's ``time`` package counts them.
_UNIT_NS = {"ms": 10**6, "s": 10**9, "m": 60 * 10**9, "h": 3600 * 10**9,
            "d": 86400 * 10**9, "w": 7 * 86400 * 10**9}  # fmt: skip
_I64_BOUND = 1 << 63
#: The longest duration any field may hold: Go's (and CEL's) ``time.Duration`` range,
#: about 292 years. Anything longer overflows pandas and datetime alike.
MAX_DURATION_NS = _I64_BOUND - 1


class _Overflow(Exception):
    pass


def _leading_int(digits: str) -> int:
    """Go's ``leadingInt``: overflow past 2**63 is an error, not a wrap."""
    x = 0
    for c in digits:
        if x > _I64_BOUND // 10:
            raise _Overflow
        x = x * 10 + ord(c) - 48
        if x > _I64_BOUND:
            raise _Overflow
    return x


def _leading_fraction(digits: str) -> tuple[int, float]:
    """Go's ``leadingFraction``: digits past int64 precision are dropped, not an error."""
    x, scale = 0, 1.0
    for c in digits:
        if x > (_I64_BOUND - 1) // 10:
            break
        y = x * 10 + ord(c) - 48
        if y > _I64_BOUND:
            break
        x, scale = y, scale * 10
    return x, scale


def duration_ns(text: str) -> int | None:
    """Nanoseconds exactly as Go's ``time.ParseDuration`` computes them (the API server's
    CEL ``duration()`` is that function), or None when Go would refuse it as invalid or
    out of range. Mirroring Go's integer-plus-float arithmetic bit for bit is what makes
    a policy the API server accepts the policy floorcast accepts, at every boundary."""
    s = text.strip() if isinstance(text, str) else ""
    if not s or s.startswith("-"):
        return None
    total, pos = 0, 0
    for m in re.finditer(r"(\d+)(?:\.(\d+))?(ms|s|m|h|d|w)", s):
        if m.start() != pos:
            return None
        pos = m.end()
        unit = _UNIT_NS[m.group(3)]
        try:
            v = _leading_int(m.group(1))
        except _Overflow:
            return None
        if v > _I64_BOUND // unit:
            return None
        v *= unit
        if m.group(2):
            f, scale = _leading_fraction(m.group(2))
            if f > 0:
                v += int(float(f) * (float(unit) / scale))
                if v > _I64_BOUND:
                    return None
        total += v
        if total > _I64_BOUND:
            return None
    if pos != len(s) or total > MAX_DURATION_NS:
        return None
    return total


def parse_duration(
    text: str,
    *,
    field: str = "duration",
    allow_zero: bool = False,
    days: bool = True,
    maximum: timedelta | None = None,
) -> timedelta:
    """Parse ``1h30m``-style text; ``field`` names the setting in the error message.

    ``days=False`` refuses ``d`` and ``w`` (policy fields, see ``DURATION_PATTERN``);
    CLI flags such as ``--lookback 14d`` keep them. ``maximum`` is inclusive and
    compared in nanoseconds, as the CRD's CEL rules compare. Sub-microsecond parts are
    truncated in the result (``timedelta`` resolution), never rounded up past a bound.
    """
    if not isinstance(text, str):
        raise InputError(f"{field}: expected a duration string such as '5m', got {text!r}")
    s = text.strip()
    if s.startswith("-"):
        raise InputError(f"{field}: duration {text!r} is negative")
    pos = 0
    for m in _PART.finditer(s):
        if m.start() != pos or (not days and m.group(2) not in _GO_UNITS):
            break
        pos = m.end()
    if not s or pos != len(s):
        units = "" if days else " (ms, s, m, h; write 24h, not 1d)"
        raise InputError(
            f"{field}: {text!r} is not a duration (use Go-style units{units}, "
            "e.g. '90s', '5m', '1h30m')"
        )
    ns = duration_ns(s)
    limit = MAX_DURATION_NS if maximum is None else min(_td_ns(maximum), MAX_DURATION_NS)
    if ns is None or ns > limit:
        shown = text if len(text) <= 40 else text[:37] + "..."
        raise InputError(f"{field}: duration {shown!r} is too long; at most "
                         f"{_limit_text(limit)} allowed")  # fmt: skip
    if ns <= 0 and not allow_zero:
        raise InputError(f"{field}: duration {text!r} must be greater than zero")
    return timedelta(microseconds=ns // 1000)


def _td_ns(d: timedelta) -> int:
    return (d.days * 86400 + d.seconds) * 10**9 + d.microseconds * 1000


def _limit_text(ns: int) -> str:
    if ns >= MAX_DURATION_NS:
        return "about 292 years (2**63 ns)"
    return format_duration(timedelta(microseconds=ns // 1000))


def format_duration(d: timedelta) -> str:
    """Render the shortest Go-style string, for messages and round-tripping."""
    secs = round(d.total_seconds())
    if secs == 0:
        return "0s"
    out = []
    for unit, size in (("h", 3600), ("m", 60), ("s", 1)):
        q, secs = divmod(secs, size)
        if q:
            out.append(f"{q}{unit}")
    return "".join(out)
