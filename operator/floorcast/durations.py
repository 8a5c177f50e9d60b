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

_UNITS = {
    "ms": timedelta(milliseconds=1),
    "s": timedelta(seconds=1),
    "m": timedelta(minutes=1),
    "h": timedelta(hours=1),
    "d": timedelta(days=1),
    "w": timedelta(weeks=1),
}
_PART = re.compile(r"(\d+(?:\.\d+)?)(ms|s|m|h|d|w)")
#: Policy durations: Go's units only, because the CRD's CEL rules check them with
#: CEL's ``duration()``, which knows Go's units and not ``d``/``w``. The CRD schema uses
#: this same pattern, so the API server and the CLI accept exactly the same strings.
DURATION_PATTERN = r"^([0-9]+(\.[0-9]+)?(ms|s|m|h))+$"
_GO_UNITS = ("ms", "s", "m", "h")


def parse_duration(
    text: str, *, field: str = "duration", allow_zero: bool = False, days: bool = True
) -> timedelta:
    """Parse ``1h30m``-style text; ``field`` names the setting in the error message.

    ``days=False`` refuses ``d`` and ``w`` (policy fields, see ``DURATION_PATTERN``);
    CLI flags such as ``--lookback 14d`` keep them.
    """
    if not isinstance(text, str):
        raise InputError(f"{field}: expected a duration string such as '5m', got {text!r}")
    s = text.strip()
    if s.startswith("-"):
        raise InputError(f"{field}: duration {text!r} is negative")
    pos = 0
    total = timedelta(0)
    for m in _PART.finditer(s):
        if m.start() != pos or (not days and m.group(2) not in _GO_UNITS):
            break
        total += float(m.group(1)) * _UNITS[m.group(2)]
        pos = m.end()
    if not s or pos != len(s):
        units = "" if days else " (ms, s, m, h; write 24h, not 1d)"
        raise InputError(
            f"{field}: {text!r} is not a duration (use Go-style units{units}, "
            "e.g. '90s', '5m', '1h30m')"
        )
    if total <= timedelta(0) and not allow_zero:
        raise InputError(f"{field}: duration {text!r} must be greater than zero")
    return total


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
