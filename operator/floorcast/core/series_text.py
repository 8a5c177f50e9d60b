"""Series as text: the CSV and JSON formats of docs/formats.md, parsed and written.

A layer above ``series.py``: it builds ``Series`` with that module's validation, and
``series.py`` never imports it, so the container can be used (and imported) without
the formats. Parsing only: no file or network I/O here either.
"""

from __future__ import annotations

import csv
import json
import re
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core import series_quantile_text as qtext
from floorcast.core.quantiles import level_name, monotone_problem
from floorcast.core.series import (
    DEFAULT_MAX_GAP,
    DEFAULT_STEP_TOLERANCE,
    UNIT,
    Problem,
    Series,
    SeriesError,
    _bands,
    _dur,
    _first,
    _iso,
    _us,
    from_samples,
)
from floorcast.core.series_cells import _numbers, _times
from floorcast.durations import parse_duration
from floorcast.errors import InputError

_POINT_KEYS = frozenset({"t", "value", "lower", "upper", "quantiles"})
_TOP_KEYS = frozenset({"unit", "step", "generated", "points", "meta"})
#: Forecast size limits (docs/operations.md, "Forecast limits"). A forecast is planned
#: point by point, so its length bounds the operator's work and memory per policy;
#: 100 000 points is 347 days at 5 minutes. Nesting is bounded before ``json.loads``
#: ever recurses (Python's parser raises RecursionError near 1000 levels), and a step
#: longer than a year can only be a typo that would push the grid past pandas' range.
MAX_FORECAST_POINTS = 100_000
MAX_JSON_DEPTH = 32
MAX_STEP = pd.Timedelta(days=366)
_JSON_STRING = re.compile(r'"(?:[^"\\\n]|\\.)*"')


def _json_depth(text: str) -> tuple[int, int]:
    """(deepest nesting of ``[``/``{``, 1-based line where it first goes past
    MAX_JSON_DEPTH or 0), in a few vectorized passes; strings are blanked first so a
    bracket inside a string does not count."""
    blank = _JSON_STRING.sub('""', text).encode("utf-8", "replace")
    b = np.frombuffer(blank, dtype=np.uint8)
    step = np.isin(b, (0x5B, 0x7B)).astype(np.int32) - np.isin(b, (0x5D, 0x7D))
    depth = np.cumsum(step)
    if depth.size == 0:
        return 0, 0
    deep = _first(depth > MAX_JSON_DEPTH)
    line = int(np.count_nonzero(b[:deep] == 0x0A)) + 1 if deep >= 0 else 0
    return int(depth.max()), line
_CORE, _BANDS = ["timestamp", "value"], ["lower", "upper"]

# ------------------------------------------------------------------------ text formats


def detect_format(text: str, source: str) -> str:
    """The extension wins (it is what the user chose); otherwise a document that starts
    with ``{`` or ``[`` is JSON and anything else is CSV."""
    ext = source.lower().rsplit(".", 1)[-1]
    if ext in ("csv", "json"):
        return ext
    return "json" if text.lstrip("\ufeff \t\r\n")[:1] in ("{", "[") else "csv"


def _base(header: list[str], forecast: bool) -> list[str]:
    """The header without its trailing quantile columns (forecasts only)."""
    k = next((i for i, c in enumerate(header) if qtext.is_quantile_column(c)), len(header))
    trailing = forecast and all(qtext.is_quantile_column(c) for c in header[k:])
    return header[:k] if trailing else header


def _header_problem(header: list[str], forecast: bool) -> str | None:
    base = _base(header, forecast)
    if base == _CORE or (forecast and base == _CORE + _BANDS):
        return None
    names = _CORE + _BANDS if forecast else _CORE
    extra = [c for c in header if c not in names]
    missing = [c for c in _CORE if c not in header]
    why = (
        "missing header line"
        if re.match(r"\d{4}-", header[0])
        else f"unexpected column {extra[0]!r}"
        if extra
        else f"missing column {missing[0]!r}"
        if missing
        else "duplicate column"
        if len(set(header)) < len(header)
        else "'lower' and 'upper' must be given together"
        if len(header) == 3
        else "columns out of order"
    )
    want = "timestamp,value[,lower,upper][,q<level>...]" if forecast else "timestamp,value"
    return f"{why}; expected header {want!r}, found {','.join(header)!r}"


def _read_csv(text: str, source: str, forecast: bool) -> dict[str, Any]:
    text = text.replace("\r\n", "\n").rstrip()
    lines = text.split("\n")
    keep = [i for i, line in enumerate(lines) if line and not line.isspace()]  # skip blanks
    if not keep:
        raise SeriesError(
            "empty input; expected the header 'timestamp,value'", source=source, row=1
        )
    if '"' in text:  # quoted cells are rare: take the exact but slower csv module path
        try:
            table = list(csv.reader([lines[i] for i in keep]))
        except csv.Error as e:
            raise SeriesError(f"malformed CSV: {e}", source=source) from None
        header, body = table[0], table[1:]
        widths = np.array([len(r) for r in body])
    else:  # a plain split is much faster on 100k-row files
        header, body = lines[keep[0]].split(","), [lines[i] for i in keep[1:]]
        widths = np.array([r.count(",") for r in body]) + 1
    header = [c.strip() for c in header]
    levels, problem = qtext.csv_header(header, _base(header, forecast))
    problem = _header_problem(header, forecast) or problem
    if problem:
        raise SeriesError(problem, source=source, row=keep[0] + 1)
    if not body:
        raise SeriesError("no data rows after the header", source=source, row=keep[0] + 2)
    width = len(header)
    i = _first(widths != width)
    if i >= 0:
        raise SeriesError(
            f"expected {width} columns ({','.join(header)}), found {widths[i]}",
            source=source,
            row=keep[i + 1] + 1,
        )
    flat = (
        ",".join(body).split(",")
        if isinstance(body[0], str)
        else [cell for r in body for cell in r]
    )
    cols = {name: flat[j::width] for j, name in enumerate(header)}
    return {
        "t": cols["timestamp"],
        "value": cols["value"],
        "lower": cols.get("lower"),
        "upper": cols.get("upper"),
        "levels": levels,
        "quantiles": [cols[c] for c in header[len(header) - len(levels):]] if levels else None,
        "rows": np.asarray(keep[1:]) + 1,
        "kind": "row",
        "text": True,
        "fields": {},
        "step": None,
    }


def _read_json(text: str, source: str) -> dict[str, Any]:
    def top(msg: str) -> SeriesError:
        return SeriesError(msg, source=source)

    def at(i: int, msg: str) -> SeriesError:
        return SeriesError(msg, source=source, row=i, kind="point")

    deepest, line = _json_depth(text)
    if line:
        raise SeriesError(f"JSON nested deeper than {MAX_JSON_DEPTH} levels", source=source,
                          row=line, kind="line")  # fmt: skip
    try:
        doc = qtext.loads(text)
    except json.JSONDecodeError as e:
        raise SeriesError(
            f"invalid JSON: {e.msg} (column {e.colno})", source=source, row=e.lineno, kind="line"
        ) from None
    except RecursionError:  # cannot happen below MAX_JSON_DEPTH; kept as a last guard
        raise SeriesError(f"JSON nested {deepest} levels deep", source=source) from None
    if not isinstance(doc, dict):
        raise top("expected a JSON object with a 'points' list")
    unknown = sorted(set(doc) - _TOP_KEYS)  # a typo such as "genrated" must not vanish
    if unknown:
        raise top(f"unknown field {unknown[0]!r}; allowed: {', '.join(sorted(_TOP_KEYS))}")
    points = doc.get("points")
    if not isinstance(points, list) or not points:
        raise top('\'points\' must be a non-empty list of {"t": ..., "value": ...} objects')
    meta = doc.get("meta")
    fields: dict[str, Any] = {"meta": {} if meta is None else meta, "unit": doc.get("unit")}
    if not isinstance(fields["meta"], dict):
        raise top("'meta' must be an object")
    if not isinstance(fields["unit"], str | None):
        raise top(f"'unit' must be a string, got {fields['unit']!r}")
    step = None
    if doc.get("step") is not None:
        try:
            step = pd.Timedelta(parse_duration(doc["step"], field="'step'", maximum=MAX_STEP))
        except InputError as e:
            raise top(e.problem) from None
    if doc.get("generated") is not None:
        gen, problem = _times([doc["generated"]], "'generated'")
        if problem:
            raise top(problem[1])
        fields["generated"] = pd.Timestamp(int(gen[0]), unit=UNIT, tz="UTC")
    for i, p in enumerate(points):
        if not isinstance(p, dict):
            raise at(i, "point must be an object")
        if not p.keys() <= _POINT_KEYS:
            raise at(
                i,
                f"unknown key {sorted(p.keys() - _POINT_KEYS)[0]!r}; allowed: "
                "t, value, lower, upper, quantiles",
            )
    lower, upper = [p.get("lower") for p in points], [p.get("upper") for p in points]
    has = np.array(
        [(lo is not None) + (up is not None) for lo, up in zip(lower, upper, strict=True)]
    )
    if has.any():
        i = _first(has < 2)
        if i >= 0:
            raise at(i, "'lower' and 'upper' must be given together, on every point or none")
    else:
        lower = upper = None
    levels, quantiles = qtext.json_points(points, at) or ([], None)
    return {
        "t": [p.get("t") for p in points],
        "value": [p.get("value") for p in points],
        "lower": lower,
        "upper": upper,
        "levels": levels,
        "quantiles": quantiles,
        "rows": np.arange(len(points)),
        "kind": "point",
        "text": False,
        "fields": fields,
        "step": step,
    }


def _parse(
    text: str, source: str, fmt: str | None, max_bytes: int | None, *, forecast: bool, **grid: Any
) -> Series:
    # Four bytes per character at most, so small texts skip the encode entirely.
    if max_bytes is not None and len(text) * 4 > max_bytes:
        size = len(text.encode("utf-8"))
        if size > max_bytes:
            raise SeriesError(
                f"input is {size} bytes, over the limit of {max_bytes} bytes "
                f"({max_bytes / 2**20:g} MiB)",
                source=source,
            )
    text = text.removeprefix("\ufeff")
    fmt = fmt or detect_format(text, source)
    if fmt not in ("csv", "json"):
        raise InputError(f"format must be 'csv' or 'json', got {fmt!r}", source=source)
    if fmt == "json" and not text.strip():
        raise SeriesError("empty input; expected a JSON object", source=source, row=1, kind="line")
    raw = _read_csv(text, source, forecast) if fmt == "csv" else _read_json(text, source)
    if forecast and len(raw["t"]) > MAX_FORECAST_POINTS:
        raise SeriesError(f"{len(raw['t'])} points, over the limit of {MAX_FORECAST_POINTS} "
                          "for a forecast", source=source)  # fmt: skip
    times, problem = _times(raw["t"])
    found, cols = [problem], {}
    for name in ("value", "lower", "upper") if raw["lower"] is not None else ("value",):
        cols[name], problem = _numbers(raw[name], name, raw["text"])
        found.append(problem)
    if len(cols) == 3 and not any(found[1:]):  # band order only among valid numbers
        found.append(_bands(cols["value"], cols["lower"], cols["upper"]))
    levels, quantiles = _quantiles(raw, found)
    found = [p for p in found if p is not None]
    if found:
        i, message = min(found, key=lambda p: p[0])  # report the earliest bad sample
        raise SeriesError(message, source=source, row=int(raw["rows"][i]), kind=raw["kind"])
    return from_samples(
        times,
        cols["value"],
        source=source,
        rows=raw["rows"],
        kind=raw["kind"],
        lower=cols.get("lower"),
        upper=cols.get("upper"),
        quantiles=quantiles,
        levels=levels,
        step=raw["step"],
        **grid,
        **raw["fields"],
    )


def _quantiles(raw: dict[str, Any], found: list[Problem]) -> tuple[tuple[float, ...], Any]:
    """The quantile columns as numbers, levels increasing; their problems go to
    ``found`` (monotonicity only when every number is valid)."""
    if raw["quantiles"] is None:
        return (), None
    idx = qtext.order(raw["levels"])
    levels = tuple(raw["levels"][j] for j in idx)
    arrays = []
    for j in idx:
        arr, problem = _numbers(raw["quantiles"][j], f"quantile {level_name(raw['levels'][j])}",
                                raw["text"])  # fmt: skip
        found.append(problem)
        arrays.append(arr)
    if any(found):
        return levels, None
    q = np.array(arrays)
    found.append(monotone_problem(levels, q))
    return levels, q


def parse_history(
    text: str,
    *,
    source: str,
    fmt: str | None = None,
    max_gap: pd.Timedelta | None = DEFAULT_MAX_GAP,
    gap_fill: str = "linear",
    step_tolerance: float = DEFAULT_STEP_TOLERANCE,
    max_bytes: int | None = None,
) -> Series:
    """Recorded load: CSV ``timestamp,value`` or the forecast JSON shape. Short gaps are
    filled (and flagged) because scrapes drop samples; long ones are the user's call."""
    return _parse(
        text,
        source,
        fmt,
        max_bytes,
        forecast=False,
        max_gap=max_gap,
        gap_fill=gap_fill,
        step_tolerance=step_tolerance,
    )


def parse_forecast(
    text: str,
    *,
    source: str,
    fmt: str | None = None,
    max_bytes: int | None = None,
    step_tolerance: float = DEFAULT_STEP_TOLERANCE,
) -> Series:
    """A stored forecast, which must be gap-free: a hole means a bug upstream, and
    filling it would have the operator act on numbers nobody predicted."""
    return _parse(
        text,
        source,
        fmt,
        max_bytes,
        forecast=True,
        max_gap=pd.Timedelta(0),
        step_tolerance=step_tolerance,
    )


def _columns(series: Series) -> list[list[str]]:
    cols = [_iso(series.times.asi8, _us(series.step)).tolist()]
    qs = () if series.quantiles is None else tuple(series.quantiles)
    for a in (series.values, series.lower, series.upper, *qs):
        if a is not None:
            cols.append(list(map(repr, a.tolist())))  # shortest text that round-trips
    return cols


def to_csv_text(series: Series) -> str:
    """CSV drops unit, generated and meta by design; JSON keeps them."""
    cols = _columns(series)
    names = (_CORE + _BANDS)[: len(cols) - len(series.levels)]
    header = ",".join(names + qtext.csv_header_names(series.levels))
    return "\n".join([header, *map(",".join, zip(*cols, strict=True))]) + "\n"


def to_json_text(series: Series) -> str:
    """One point per line, so stored forecasts diff and page readably."""
    head: dict[str, Any] = {"unit": series.unit, "step": _dur(_us(series.step))}
    if series.generated is not None:
        head["generated"] = str(_iso(_us(series.generated))[0])
    if series.meta:
        head["meta"] = series.meta
    cols = _columns(series)
    keys = ["value", "lower", "upper"][: len(cols) - 1 - len(series.levels)]
    row = '    {"t": "%s", ' + ", ".join(f'"{k}": %s' for k in keys)
    row += (qtext.json_fragment(series.levels) if series.levels else "") + "}"
    points = ",\n".join(row % r for r in zip(*cols, strict=True))

    def plain(v: Any) -> Any:  # numpy scalars and arrays often end up in meta
        return v.tolist() if isinstance(v, np.ndarray | np.generic) else str(v)

    lines = [f'  "{k}": {json.dumps(v, default=plain)},' for k, v in head.items()]
    return "{\n" + "\n".join(lines) + '\n  "points": [\n' + points + "\n  ]\n}\n"


# ------------------------------------------------------------------------ resampling
