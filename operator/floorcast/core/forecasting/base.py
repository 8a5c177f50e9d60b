"""The contract every forecasting method follows, so the engine can treat them alike.

A method is a pure function over a batch of equally long, gap-free, finite series:

    forecast(y: ndarray (N, T), *, season: int, horizon: int, **options) -> ndarray (N, H)

``season`` is the seasonal period in steps (0 = no season); the result is the point
forecast for the ``horizon`` steps after the last observation. Methods never read
files, clocks or global state, and never return NaN: a series they cannot handle
raises ``ForecastError`` naming which series (by row) and why.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Protocol

import numpy as np

from floorcast.errors import InputError


class ForecastError(InputError):
    """History that cannot give a trustworthy forecast (too short, all gaps, ...)."""


class HistoryTooShort(ForecastError):
    """Too few observations for a method: the same for every series of a batch (they
    share one length), so a caller need not look for the rows to blame."""


class Method(Protocol):
    def __call__(self, y: np.ndarray, *, season: int, horizon: int) -> np.ndarray: ...


MethodFn = Callable[..., np.ndarray]


def as_batch(y: np.ndarray) -> np.ndarray:
    """Accept one series (T,) or a batch (N, T); always work on (N, T) float64."""
    a = np.asarray(y, dtype=np.float64)
    if a.ndim == 1:
        a = a[None, :]
    if a.ndim != 2:
        raise ForecastError(f"expected a series or a 2-D batch of series, got shape {a.shape}")
    if not np.all(np.isfinite(a)):
        rows = np.flatnonzero(~np.all(np.isfinite(a), axis=1))
        raise ForecastError(f"series {rows[:5].tolist()} contain NaN or infinite values")
    return a


def require_length(y: np.ndarray, needed: int, what: str) -> None:
    """A clear error instead of a silently bad forecast from too little history."""
    if y.shape[1] < needed:
        raise HistoryTooShort(
            f"{what} needs at least {needed} observations, the history has {y.shape[1]}"
        )
