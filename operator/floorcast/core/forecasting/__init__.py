"""Forecasting methods (one module each) and the engine that picks and bands them.

``METHODS`` maps the CLI's ``--method`` names to the method functions; each follows
the contract in ``base.py``. Imports are lazy so that importing the package stays
cheap for the operator, which never forecasts.
"""

from __future__ import annotations

import importlib

from floorcast.core.forecasting.base import ForecastError, MethodFn

#: --method name -> "module:function" inside this package.
METHODS: dict[str, str] = {
    "seasonal-naive": "seasonal_naive:forecast",
    "seasonal-average": "multiweek:average_forecast",
    "seasonal-mean": "multiweek:mean_forecast",
    "seasonal-median": "multiweek:median_forecast",
    "seasonal-trimmed": "multiweek:trimmed_forecast",
    "fourier": "fourier:forecast",
    "holt-winters": "holt_winters:forecast",
    "holt-winters-double": "holt_winters:double_forecast",
}


def method(name: str) -> MethodFn:
    """The forecast function for a ``--method`` name."""
    try:
        target = METHODS[name]
    except KeyError:
        raise ForecastError(
            f"unknown forecasting method {name!r}; choose one of {', '.join(sorted(METHODS))}"
        ) from None
    module, fn = target.split(":")
    return getattr(importlib.import_module(f"{__name__}.{module}"), fn)


__all__ = ["METHODS", "ForecastError", "method"]
