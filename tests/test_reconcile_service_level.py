"""The ForecastAvailable condition says when a policy's ``serviceLevel`` could not be
used because the forecast has no quantiles (docs/policy.md, "serviceLevel")."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from test_reconcile import _second_run, cond, forecast, observed, policy

from floorcast.controller.decide import decide
from floorcast.controller.state import ForecastState

FALLBACK = "serviceLevel 0.95 asked but the forecast has no quantiles; sized on"


def _with_band(s):
    v = np.asarray(s.values)
    return replace(s, lower=v * 0.5, upper=v * 1.5)


def test_fallback_to_the_upper_band_is_in_the_condition_and_stays_put():
    obs = observed(policy(serviceLevel=0.95), fc=ForecastState(series=_with_band(forecast())))
    d = decide(obs)
    msg = cond(d, "ForecastAvailable")["message"]
    assert msg.endswith(f"; {FALLBACK} upper band")
    assert cond(d, "ForecastAvailable")["status"] == "True"
    assert not decide(_second_run(obs)).status_changed


def test_fallback_to_the_value_without_a_band():
    d = decide(observed(policy(serviceLevel=0.95)))
    assert cond(d, "ForecastAvailable")["message"].endswith(f"; {FALLBACK} value")


def test_no_note_with_quantiles_or_without_service_level():
    s = forecast()
    v = np.asarray(s.values)
    with_q = replace(s, levels=(0.5, 0.95), quantiles=np.stack([v, v * 2]))
    for pol, series in ((policy(serviceLevel=0.95), with_q), (policy(), forecast())):
        msg = cond(decide(observed(pol, fc=ForecastState(series=series))), "ForecastAvailable")
        assert "serviceLevel" not in msg["message"]
