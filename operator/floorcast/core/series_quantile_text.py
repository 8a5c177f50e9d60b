"""Forecast quantiles in the CSV and JSON formats (docs/formats.md, "Quantiles").

CSV: trailing columns named ``q`` + level (``q0.5,q0.8,q0.95``); JSON: a per-point
``"quantiles": {"0.5": x, "0.8": y}`` object with the same levels on every point.
Split from ``series_text`` (which calls it) by concern; the checks on the numbers
themselves are ``core.quantiles``'.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

import numpy as np

from floorcast.core.quantiles import MAX_QUANTILES, level_name, parse_level

Problem = tuple[int, str] | None


def _levels(names: list[str], what: Callable[[str], str]) -> tuple[list[float], str | None]:
    """Levels from their names, or the first problem: not a number, outside (0, 1), the
    same level twice (``q0.5`` and ``q0.50``), more than MAX_QUANTILES."""
    if len(names) > MAX_QUANTILES:
        return [], f"{len(names)} quantile levels, over the limit of {MAX_QUANTILES}"
    seen: dict[float, str] = {}
    for name in names:
        level = parse_level(name)
        if level is None:
            return [], f"{what(name)} is not a quantile level (expected a number such as 0.95)"
        if not 0 < level < 1:
            return [], f"{what(name)}: quantile level {level:g} is outside (0, 1)"
        if level in seen:
            return [], f"{what(name)} repeats quantile level {level:g} ({what(seen[level])})"
        seen[level] = name
    return list(seen), None


def csv_header(header: list[str], base: list[str]) -> tuple[list[float], str | None]:
    """The levels of the ``q…`` columns after ``base``; ``base`` must come first."""
    return _levels([c[1:] for c in header[len(base):]], lambda n: f"column 'q{n}'")


def is_quantile_column(name: str) -> bool:
    return name.startswith("q") and name != "q"


class DuplicateKeys(dict):
    """A JSON object that named a key twice (``json.loads`` would keep the last)."""

    repeated: str = ""


def pairs_hook(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    """``object_pairs_hook`` for forecasts with quantiles: keeps a repeated key visible
    so ``{"0.5": 1, "0.5": 2}`` is an error at its point, not a silent last-wins."""
    out = dict(pairs)
    if len(out) < len(pairs):
        dup = DuplicateKeys(out)
        keys = [k for k, _ in pairs]
        dup.repeated = next(k for i, k in enumerate(keys) if k in keys[:i])
        return dup
    return out


def loads(text: str) -> Any:
    """``json.loads``; the slower duplicate-key hook only when quantiles are present."""
    if '"quantiles"' in text:
        return json.loads(text, object_pairs_hook=pairs_hook)
    return json.loads(text)


def json_points(
    points: list[dict[str, Any]], fail: Callable[[int, str], Exception]
) -> tuple[list[float], list[list[Any]]] | None:
    """(levels, one raw value list per level) from the points' ``quantiles`` objects,
    or None when no point has them; every point must carry the same level keys."""
    for i, p in enumerate(points):
        if isinstance(p, DuplicateKeys):
            raise fail(i, f"key {p.repeated!r} given twice")
    if all(p.get("quantiles") is None for p in points):
        return None
    first = next(i for i, p in enumerate(points) if p.get("quantiles") is not None)
    q0 = points[first]["quantiles"]
    if isinstance(q0, dict) and not isinstance(q0, DuplicateKeys):
        if not q0:
            raise fail(first, "'quantiles' is empty; give at least one level or leave it out")
        levels, problem = _levels(list(q0), lambda n: f"quantile key {n!r}")
        if problem:
            raise fail(first, problem)
    for i, p in enumerate(points):
        q = p.get("quantiles")
        if not isinstance(q, dict):
            got = "missing" if q is None else f"{type(q).__name__}"
            raise fail(i, f"'quantiles' {got}; expected an object of levels to numbers "
                          f"on every point, like point {first}")  # fmt: skip
        if isinstance(q, DuplicateKeys):
            raise fail(i, f"quantile level {q.repeated!r} given twice")
    names = list(q0)
    want = set(names)
    for i, p in enumerate(points):
        keys = set(p["quantiles"])
        if keys != want:
            extra, missing = sorted(keys - want), sorted(want - keys)
            why = f"extra level {extra[0]!r}" if extra else f"missing level {missing[0]!r}"
            raise fail(i, f"quantile levels differ from point {first}'s: {why}")
    return levels, [[p["quantiles"][n] for p in points] for n in names]


def order(levels: list[float]) -> np.ndarray:
    """Levels may be given in any order; the Series holds them increasing."""
    return np.argsort(levels, kind="stable")


def csv_header_names(levels: tuple[float, ...]) -> list[str]:
    return [f"q{level_name(x)}" for x in levels]


def json_fragment(levels: tuple[float, ...]) -> str:
    """The per-point ``"quantiles"`` template (``%s`` per level)."""
    inner = ", ".join(f'"{level_name(x)}": %s' for x in levels)
    return ', "quantiles": {' + inner + "}"
