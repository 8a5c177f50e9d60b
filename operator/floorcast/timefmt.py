"""RFC 3339 instants, the only timestamp form floorcast reads or writes.

A timestamp without a UTC offset is refused: a floor raised an hour early or late
because of a guessed time zone is exactly the kind of silent error this tool exists
to prevent.
"""

from __future__ import annotations

import pandas as pd

from floorcast.errors import InputError


def parse_rfc3339(text: str, *, field: str = "timestamp") -> pd.Timestamp:
    """Parse an RFC 3339 instant into a UTC ``pd.Timestamp``."""
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"{field}: expected an RFC 3339 timestamp, got {text!r}")
    try:
        t = pd.Timestamp(text.strip())
    except (ValueError, TypeError):
        raise InputError(
            f"{field}: {text!r} is not an RFC 3339 timestamp (e.g. 2026-12-01T12:00:00Z)"
        ) from None
    if t is pd.NaT or t.tzinfo is None:
        raise InputError(f"{field}: {text!r} has no UTC offset; add 'Z' or e.g. '+01:00'")
    return t.tz_convert("UTC")


def iso(t: pd.Timestamp) -> str:
    """RFC 3339 in UTC with a ``Z``, the form every floorcast output uses."""
    t = pd.Timestamp(t)
    t = t.tz_localize("UTC") if t.tzinfo is None else t.tz_convert("UTC")
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")
