"""Forecast quantiles: their checks, their names and reading a level between them.

A forecast may carry the load at several probability levels per point (docs/formats.md,
"Quantiles"); a policy's ``serviceLevel`` picks the level its floor is sized on
(docs/policy.md, "serviceLevel"). Both the format and the planner need the same rules,
so they live here, below ``series.py``; pure numpy, no I/O.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

#: At most this many quantile levels per forecast: enough for any fan chart, and it
#: bounds a file's width (common practice, no source).
MAX_QUANTILES = 32
#: A level's name in CSV headers (``q0.95``) and its key in JSON (``"0.95"``): a plain
#: decimal number. Anything number-like is accepted here so that ``q95`` or ``q1.5``
#: get the precise "outside (0, 1)" message rather than "unexpected column".
_LEVEL = re.compile(r"^(\d+(?:\.\d*)?|\.\d+)$")


def _first(mask: np.ndarray) -> int:
    return int(np.argmax(mask)) if mask.any() else -1


def parse_level(text: str) -> float | None:
    """The probability a level name stands for, or None when it is not a number."""
    return float(text) if _LEVEL.match(text) else None


def level_name(level: float) -> str:
    """The shortest decimal that reads back as the same float (``0.95``, ``0.999``)."""
    return repr(float(level))


def quantile_problem(levels: tuple[float, ...], q: np.ndarray | None, n: int) -> str | None:
    """Why forecast quantiles are unusable, or None: levels strictly increasing in
    (0, 1), at most MAX_QUANTILES, finite non-negative values that never decrease from
    one level to the next at a sample (a quantile function is monotone)."""
    if q is None:
        return "quantile levels without quantile values" if levels else None
    if q.shape != (len(levels), n) or not levels:
        return f"quantiles must have shape (levels, samples) = ({len(levels)}, {n})"
    lv = np.asarray(levels)
    if len(lv) > MAX_QUANTILES:
        return f"{len(lv)} quantile levels, over the limit of {MAX_QUANTILES}"
    inside = (lv > 0) & (lv < 1)
    if not inside.all():
        return f"quantile level {lv[_first(~inside)]:g} is outside (0, 1)"
    if (np.diff(lv) <= 0).any():
        return "quantile levels must be strictly increasing"
    bad = _first((~np.isfinite(q) | (q < 0)).any(axis=0))
    if bad >= 0:
        return f"sample {bad}: quantile values must be finite and >= 0"
    down = _first((np.diff(q, axis=0) < 0).any(axis=0))
    if down >= 0:
        return f"sample {down}: quantiles decrease from one level to the next"
    return None


def monotone_problem(levels: tuple[float, ...], q: np.ndarray) -> tuple[int, str] | None:
    """(first sample, message) where a higher level has a lower value than the one
    below it; the parser reports it with the file's row."""
    drop = np.diff(q, axis=0) < 0
    i = _first(drop.any(axis=0))
    if i < 0:
        return None
    j = _first(drop[:, i])
    lo, hi = level_name(levels[j]), level_name(levels[j + 1])
    return i, (f"quantile {hi} ({q[j + 1, i]:g}) is below quantile {lo} ({q[j, i]:g}); "
               "quantiles must not decrease as the level rises")  # fmt: skip


@dataclass(frozen=True)
class Reading:
    """Which level a line was read at: ``level`` the one used, ``asked`` the one wanted
    (they differ only when ``asked`` is outside the forecast's levels and was clamped)."""

    level: float
    asked: float

    @property
    def clamped(self) -> bool:
        return self.level != self.asked


def quantile_at(
    levels: tuple[float, ...], q: np.ndarray, level: float
) -> tuple[np.ndarray, Reading]:
    """The load at probability ``level`` per sample: linear in the level between the
    two nearest given levels (what ``numpy.interp(level, levels, q[:, i])`` gives at
    each sample ``i``), clamped to the lowest/highest given level outside them."""
    lv = np.asarray(levels, dtype=np.float64)
    used = float(min(max(level, lv[0]), lv[-1]))
    j = int(np.clip(np.searchsorted(lv, used, side="right") - 1, 0, len(lv) - 1))
    if j == len(lv) - 1 or used == lv[j]:
        line = np.asarray(q[j], dtype=np.float64)
    else:
        w = (used - lv[j]) / (lv[j + 1] - lv[j])
        line = (1.0 - w) * q[j] + w * q[j + 1]
    return line, Reading(level=used, asked=float(level))
