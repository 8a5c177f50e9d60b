"""Regular time series of load: the one validated shape every later stage can trust.

Planning, back-testing and the operator all assume a fixed step, finite non-negative
values and UTC times, so those guarantees are established once, here, and every
violation becomes a ``SeriesError`` naming the source, the row and the problem. The
text formats (CSV, JSON) are ``series_text``, one layer up, which builds on this
module and never the other way round; reading files, ConfigMaps or HTTP bodies is the
job of ``floorcast.sources``. Times are held at microsecond resolution, pandas' own
default.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from floorcast.core.quantiles import quantile_problem
from floorcast.durations import format_duration
from floorcast.errors import InputError

#: Longest hole in history that is filled (and flagged in ``filled``). Half an hour
#: covers a scraper restart or a short outage; across a longer hole we would be
#: inventing a peak or a trough, so that is an error the user must resolve.
DEFAULT_MAX_GAP = pd.Timedelta(minutes=30)
#: How far a timestamp may sit from the regular grid, as a fraction of the step.
DEFAULT_STEP_TOLERANCE = 0.1
#: Stops a tiny step across a long hole from turning a small file into gigabytes.
MAX_POINTS = 10_000_000
UNIT = "us"
_SEC, _MS = 1_000_000, 1_000
Problem = tuple[int, str] | None  # (index of the first bad sample, what is wrong)


class SeriesError(InputError):
    """Bad series input. ``kind`` says what ``row`` counts: a CSV ``row`` (file line,
    header = 1), a JSON ``point`` (0-based index into ``points``) or a JSON ``line``."""

    def __init__(
        self, message: str, *, source: str | None = None, row: int | None = None, kind: str = "row"
    ):
        super().__init__(message, source=source, row=row)
        self.kind = kind
        if kind != "row" and source and row is not None:
            self.args = (f"{source}, {kind} {row}: {message}",)


def _us(x: pd.Timestamp | pd.Timedelta) -> int:
    # ``.value`` is nanoseconds whatever the unit, so read the raw microsecond count.
    return int(x.as_unit(UNIT).asm8.view("int64"))


def _utc(ts: Any, what: str) -> pd.Timestamp:
    t = pd.Timestamp(ts)
    if t.tzinfo is None:
        raise ValueError(f"{what} {t} has no UTC offset; naive times are ambiguous")
    return t.tz_convert("UTC").as_unit(UNIT)


def _frozen(a: Any, dtype: Any = np.float64) -> np.ndarray | None:
    if a is None:
        return None
    out = np.array(a, dtype=dtype)  # a copy: the caller's array stays writeable
    out.flags.writeable = False
    return out


@dataclass(frozen=True, eq=False)
class Series:
    """A gap-free series on a regular UTC grid; arrays are read-only so slices can share them."""

    start: pd.Timestamp
    step: pd.Timedelta
    values: np.ndarray
    lower: np.ndarray | None = None
    upper: np.ndarray | None = None
    unit: str | None = None
    generated: pd.Timestamp | None = None
    source: str = "<series>"
    filled: np.ndarray | None = None
    meta: dict = field(default_factory=dict)
    #: Optional forecast quantiles (docs/formats.md, "Quantiles"): ``levels`` strictly
    #: increasing in (0, 1), ``quantiles[j]`` the load at ``levels[j]`` per sample.
    levels: tuple[float, ...] = ()
    quantiles: np.ndarray | None = None

    def __post_init__(self) -> None:
        # Code that builds a Series directly gets the parser's invariants too; a breach
        # here is a caller bug rather than a user's file, hence plain ValueErrors.
        put = object.__setattr__
        put(self, "start", _utc(self.start, "start"))
        put(self, "step", pd.Timedelta(self.step).as_unit(UNIT))
        if self.step <= pd.Timedelta(0):
            raise ValueError(f"step must be positive, got {self.step}")
        if self.generated is not None:
            put(self, "generated", _utc(self.generated, "generated"))
        for name in ("values", "lower", "upper", "filled"):
            put(self, name, _frozen(getattr(self, name), bool if name == "filled" else None))
            arr = getattr(self, name)
            if arr is not None and arr.shape != (len(self.values),):
                raise ValueError(f"{name} must be 1-D and as long as values")
        if (self.lower is None) != (self.upper is None):
            raise ValueError("lower and upper must be given together")
        for name in ("values", "lower", "upper"):
            arr = getattr(self, name)
            problem = None if arr is None else _load_problem(arr, arr, name, False)
            if problem:
                raise ValueError(f"{self.source}, sample {problem[0]}: {problem[1]}")
        problem = self.lower is not None and _bands(self.values, self.lower, self.upper)
        if problem:
            raise ValueError(f"{self.source}, sample {problem[0]}: {problem[1]}")
        put(self, "meta", dict(self.meta))
        put(self, "levels", tuple(float(x) for x in self.levels))
        put(self, "quantiles", _frozen(self.quantiles))
        problem = quantile_problem(self.levels, self.quantiles, len(self.values))
        if problem:
            raise ValueError(f"{self.source}: {problem}")

    def __len__(self) -> int:
        return len(self.values)

    def __eq__(self, other: object) -> bool:
        # Arrays make dataclass equality ambiguous; "no mask" counts as "nothing filled".
        if not isinstance(other, Series):
            return NotImplemented
        pairs = [(self.lower, other.lower), (self.upper, other.upper),
                 (self.quantiles, other.quantiles)]  # fmt: skip
        return (
            (self.start, self.step, self.unit, self.generated, self.meta)
            == (other.start, other.step, other.unit, other.generated, other.meta)
            and np.array_equal(self.values, other.values)
            and np.array_equal(self.filled_mask(), other.filled_mask())
            and self.levels == other.levels
            and all(
                (a is None) == (b is None) and (a is None or np.array_equal(a, b)) for a, b in pairs
            )
        )

    __hash__ = None  # type: ignore[assignment]

    @property
    def times(self) -> pd.DatetimeIndex:
        us = _us(self.start) + np.arange(len(self), dtype=np.int64) * _us(self.step)
        return pd.DatetimeIndex(us.astype(f"datetime64[{UNIT}]")).tz_localize("UTC")

    @property
    def end(self) -> pd.Timestamp:
        if not len(self):
            raise ValueError(f"{self.source}: an empty series has no end")
        return self.start + self.step * (len(self) - 1)

    def filled_mask(self) -> np.ndarray:
        """Always an array, so callers need not special-case "nothing was filled"."""
        return self.filled if self.filled is not None else np.zeros(len(self), dtype=bool)

    def upper_or_value(self) -> np.ndarray:
        """Planning sizes for the pessimistic band whenever the forecaster gave one."""
        return self.upper if self.upper is not None else self.values

    def slice(self, start: Any = None, end: Any = None) -> Series:
        """Half-open ``[start, end)`` so consecutive windows never share a sample."""
        n = len(self)

        def index(t: Any, default: int) -> int:
            if t is None:
                return default
            return min(max(math.ceil((_utc(t, "slice bound") - self.start) / self.step), 0), n)

        i0 = index(start, 0)
        i1 = max(index(end, n), i0)
        cut = {
            k: None if (a := getattr(self, k)) is None else a[i0:i1]
            for k in ("values", "lower", "upper", "filled")
        }
        q = None if self.quantiles is None else self.quantiles[:, i0:i1]
        return replace(self, start=self.start + self.step * i0, quantiles=q, **cut)


# ------------------------------------------------------------------------ grid and gaps


def fill_gaps(slots: np.ndarray, values: np.ndarray, how: str = "linear") -> np.ndarray:
    """Values for every slot ``0..slots[-1]`` from samples at sorted integer grid ``slots``;
    separate from validation so other adapters (e.g. a metrics API) can reuse it."""
    full = np.arange(int(slots[-1]) + 1)
    if how == "linear":
        return np.interp(full, slots, values)
    if how == "ffill":
        return np.asarray(values)[np.searchsorted(slots, full, side="right") - 1]
    raise InputError(f"gap fill must be 'linear' or 'ffill', got {how!r}")


def _iso(us: Any, step_us: int = 0) -> np.ndarray:
    """RFC 3339 with ``Z`` at the coarsest precision that loses nothing."""
    arr = np.atleast_1d(np.asarray(us, dtype=np.int64))
    unit = next(
        (
            u
            for u, size in (("s", _SEC), ("ms", _MS))
            if not (arr % size).any() and step_us % size == 0
        ),
        "us",
    )
    return np.datetime_as_string(arr.astype("datetime64[us]"), unit=unit, timezone="UTC")


def _dur(us: int) -> str:
    if us % _SEC == 0:
        return format_duration(pd.Timedelta(us, UNIT).to_pytimedelta())
    return f"{us // _MS}ms" if us % _MS == 0 else f"{us}us"


def _infer_step(t: np.ndarray, d: np.ndarray) -> int:
    # Spacings near the smallest one are the step (gaps are multiples of it), unless
    # they are too few to be the norm: one stray sample must not turn a 5-minute series
    # into a 10-second one, so then the median spacing is used. The slope over long
    # baselines (median, so a stray sample cannot tilt it) then averages jitter out.
    near = d[d < 1.5 * d.min()]
    k = np.round((t - t[0]) / float(np.median(near if 3 * len(near) >= len(d) else d)))
    h = max(len(t) // 2, 1)
    dk = k[h:] - k[:-h]
    slope = float(np.median((t[h:] - t[:-h])[dk > 0] / dk[dk > 0]))
    res = _SEC if slope >= _SEC else _MS if slope >= _MS else 1
    return max(round(slope / res) * res, 1)


def from_samples(
    times_us: np.ndarray,
    values: np.ndarray,
    *,
    source: str,
    rows: np.ndarray | None = None,
    kind: str = "row",
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
    quantiles: np.ndarray | None = None,
    step: pd.Timedelta | None = None,
    max_gap: pd.Timedelta | None = DEFAULT_MAX_GAP,
    gap_fill: str = "linear",
    step_tolerance: float = DEFAULT_STEP_TOLERANCE,
    **fields: Any,
) -> Series:
    """Check order, grid and gaps of already-typed samples, fill short gaps and snap to
    the grid. ``rows`` label the samples in errors; ``max_gap=None`` fills any gap and
    ``pd.Timedelta(0)`` allows none. ``fields`` pass through to ``Series``."""
    if not 0 <= step_tolerance < 0.5:  # at 0.5 a sample could belong to two grid slots
        raise InputError(f"step tolerance must be in [0, 0.5), got {step_tolerance}")
    if gap_fill not in ("linear", "ffill"):
        raise InputError(f"gap fill must be 'linear' or 'ffill', got {gap_fill!r}")
    t = np.asarray(times_us, dtype=np.int64)
    n = len(t)
    labels = np.arange(n) if rows is None else np.asarray(rows)

    def iso(i: int) -> str:  # messages only, so formatted lazily
        return str(_iso(t[i])[0])

    def fail(i: int, msg: str) -> SeriesError:
        return SeriesError(msg, source=source, row=int(labels[i]), kind=kind)

    def other(i: int) -> str:
        return f"{kind} {int(labels[i])} ({iso(i)})"

    d = np.diff(t)
    if (d <= 0).any():
        i = int(np.argmax(d <= 0))
        if d[i] == 0:
            raise fail(i + 1, f"duplicate timestamp {iso(i + 1)} (same as {kind} {labels[i]})")
        raise fail(
            i + 1,
            f"timestamp {iso(i + 1)} is earlier than {other(i)}; samples must be sorted by time",
        )
    if step is None and n < 2:
        raise fail(0, "need at least two samples to infer the step")
    inferred = _infer_step(t, d) if n >= 2 else None
    step_us = inferred if step is None else _us(pd.Timedelta(step))
    tol = step_tolerance * step_us
    if step is not None and inferred is not None and abs(inferred - step_us) > tol:
        i = int(np.argmax(np.abs(d - step_us) > tol))
        raise fail(
            i + 1,
            f"declared step {_dur(step_us)!r} disagrees with the timestamps "
            f"(typical spacing {_dur(inferred)}; {iso(i + 1)} is "
            f"{_dur(int(d[i]))} after {other(i)})",
        )
    # Fit the grid origin to all samples (median residual), not only the first one. Exact
    # data keeps it; jittered data snaps to an epoch-aligned grid (00:00, 00:05, ...), or
    # else to whole seconds, whichever fits first.
    fit = int(t[0])
    for _ in range(2):
        fit += int(np.median(t - fit - (t - fit + step_us // 2) // step_us * step_us))
    for origin, limit in (
        (fit, 0),
        (round(fit / step_us) * step_us, tol),
        (round(fit / _SEC) * _SEC, tol),
        (fit, tol),
    ):
        k = (t - origin + step_us // 2) // step_us
        resid = np.abs(t - origin - k * step_us)
        if not (resid > limit).any():
            break
    else:
        i = int(np.argmax(resid > tol))
        raise fail(
            i,
            f"irregular step: {iso(i)} is {resid[i] / _SEC:g}s off the regular "
            f"{_dur(step_us)} grid (nearest slot {_iso(origin + k[i] * step_us)[0]}, "
            f"tolerance {tol / _SEC:g}s)",
        )
    dk = np.diff(k)
    if (dk == 0).any():
        i = int(np.argmax(dk == 0))
        raise fail(
            i + 1, f"timestamp {iso(i + 1)} falls in the same {_dur(step_us)} slot as {other(i)}"
        )
    missing = dk - 1
    limit = None if max_gap is None else _us(pd.Timedelta(max_gap))
    if limit is not None and (missing * step_us > limit).any():
        i = int(np.argmax(missing * step_us > limit))
        why = "forecasts must be gap-free" if limit == 0 else f"over the max gap of {_dur(limit)}"
        raise fail(
            i + 1,
            f"gap of {_dur(int(missing[i]) * step_us)} ({missing[i]} missing "
            f"samples at step {_dur(step_us)}) between {other(i)} and "
            f"{other(i + 1)}; {why}",
        )
    slots = k - k[0]
    if int(slots[-1]) + 1 > MAX_POINTS:
        raise fail(
            n - 1,
            f"the series would hold {int(slots[-1]) + 1} samples, over the limit of {MAX_POINTS}",
        )
    filled = None
    if missing.any():
        values, lower, upper = (
            None if a is None else fill_gaps(slots, a, gap_fill) for a in (values, lower, upper)
        )
        if quantiles is not None:
            quantiles = np.array([fill_gaps(slots, q, gap_fill) for q in quantiles])
        filled = np.ones(len(values), dtype=bool)
        filled[slots] = False
    start = pd.Timestamp(origin + int(k[0]) * step_us, unit=UNIT, tz="UTC")
    return Series(
        start=start,
        step=pd.Timedelta(step_us, UNIT),
        values=values,
        lower=lower,
        upper=upper,
        quantiles=quantiles,
        filled=filled,
        source=source,
        **fields,
    )


def resample(series: Series, step: pd.Timedelta, how: str = "mean") -> Series:
    """Change the step on an epoch-aligned grid (as pandas' ``origin="epoch"``).
    Downsampling aggregates each bin (``mean`` or ``max``) and labels it by its left
    edge; upsampling, or ``how="interpolate"``, reads the straight line between
    neighbours. A new sample is flagged filled if any sample it came from was."""
    if how not in ("mean", "max", "interpolate"):
        raise InputError(f"resample method must be mean, max or interpolate, got {how!r}")
    new, old = _us(pd.Timedelta(step)), _us(series.step)
    if new <= 0:
        raise InputError(f"resample step must be positive, got {step}")
    if new == old or not len(series):
        return series
    t, filled = series.times.asi8, series.filled_mask()
    qs = () if series.quantiles is None else tuple(series.quantiles)
    arrays = (series.values, series.lower, series.upper, *qs)
    if new > old and how != "interpolate":
        bins = t // new
        starts = np.flatnonzero(np.r_[True, bins[1:] != bins[:-1]])
        if how == "mean":
            counts = np.diff(np.r_[starts, len(t)])
            out = [None if a is None else np.add.reduceat(a, starts) / counts for a in arrays]
        else:
            out = [None if a is None else np.maximum.reduceat(a, starts) for a in arrays]
        first, mask = int(bins[0]) * new, np.logical_or.reduceat(filled, starts)
    else:
        first = -(-int(t[0]) // new) * new
        grid = first + np.arange(max((int(t[-1]) - first) // new + 1, 0)) * new
        out = [None if a is None else np.interp(grid, t, a) for a in arrays]
        left = np.clip(np.searchsorted(t, grid, side="right") - 1, 0, len(t) - 1)
        mask = filled[left] | ((grid != t[left]) & filled[np.minimum(left + 1, len(t) - 1)])
    return replace(
        series,
        start=pd.Timestamp(first, unit=UNIT, tz="UTC"),
        step=pd.Timedelta(new, UNIT),
        values=out[0],
        lower=out[1],
        upper=out[2],
        quantiles=np.array(out[3:]) if qs else None,
        filled=mask if mask.any() else None,
    )


# ------------------------------------------- checks shared with series_text.py


def _first(mask: np.ndarray) -> int:
    return int(np.argmax(mask)) if mask.any() else -1


def _load_problem(arr: np.ndarray, raw: Any, name: str, from_text: bool) -> Problem:
    """The first sample that is not a finite, non-negative number, and why."""
    i = _first(~np.isfinite(arr) | (arr < 0))
    if i < 0:
        return None
    cell = raw[i].strip() if from_text else raw[i]
    if from_text and np.isnan(arr[i]) and cell.lstrip("+-").lower() != "nan":
        return i, f"{name} {cell!r} is not a number" if cell else f"missing {name}"
    if np.isnan(arr[i]):
        return i, f"{name} is NaN"
    if np.isinf(arr[i]):
        return i, f"{name} is infinite ({cell})"
    return i, f"{name} {cell} is negative (load cannot be below zero)"


def _bands(values: np.ndarray, lower: np.ndarray, upper: np.ndarray) -> Problem:
    lo, hi = _first(lower > values), _first(values > upper)
    if lo >= 0 and (hi < 0 or lo <= hi):
        return lo, f"lower bound {lower[lo]:g} is above the value {values[lo]:g}"
    return None if hi < 0 else (hi, f"value {values[hi]:g} is above the upper bound {upper[hi]:g}")


__all__ = [

    "DEFAULT_MAX_GAP",
    "DEFAULT_STEP_TOLERANCE",
    "Series",
    "SeriesError",
    "fill_gaps",
    "from_samples",
    "resample",
]
