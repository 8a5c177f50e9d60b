"""core/correction.py: the live level correction's EWMA, factor and floor."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from floorcast.core import correction


def test_ratio_of_ewmas_is_pandas_ewm_on_the_same_samples():
    # Reference: pandas' own EWMA (DataFrame.ewm(alpha, adjust=True).mean(), the weighted
    # mean Σ (1−α)^k x_{t−k} / Σ (1−α)^k), on observed and forecast alike.
    rng = np.random.default_rng(3)
    obs = rng.uniform(5, 15, size=(2, 200))
    fc = rng.uniform(5, 15, size=(2, 200))
    dt, hl = 30.0, 600.0
    alpha = 1 - 2 ** (-dt / hl)
    st_ = correction.State.empty(2)
    for t in range(200):
        st_ = correction.update(st_, obs[:, t], fc[:, t], dt, hl)
    ref_o = pd.DataFrame(obs.T).ewm(alpha=alpha, adjust=True).mean().to_numpy()[-1]
    ref_f = pd.DataFrame(fc.T).ewm(alpha=alpha, adjust=True).mean().to_numpy()[-1]
    assert st_.observed / st_.forecast == pytest.approx(ref_o / ref_f, rel=1e-12)
    # The weight is the share a series observed forever would have: 1 − (1 − α)^n.
    assert st_.weight == pytest.approx(1 - (1 - alpha) ** 200, rel=1e-12)


def test_track_is_update_then_factor_at_every_column():
    rng = np.random.default_rng(5)
    obs = rng.uniform(0, 20, size=(3, 80))
    obs[1, 10:30] = np.nan  # a gap: the evidence ages
    fc = rng.uniform(1, 20, size=(3, 80))
    got = correction.track(obs, fc, 30.0, 300.0, low=0.5, high=2.0, min_level=1.0)
    st_ = correction.State.empty(3)
    for t in range(80):
        st_ = correction.update(st_, obs[:, t], fc[:, t], 30.0, 300.0)
        want = correction.factor(st_, low=0.5, high=2.0, min_level=1.0)
        np.testing.assert_array_equal(got[:, t], want)


def test_no_factor_before_one_half_life_of_evidence():
    hl, dt = 600.0, 30.0
    n = 20  # 600 s of readings = one half-life: weight 1 − 2^−1 = 0.5
    f = correction.track(np.full((1, n + 1), 12.0), np.full((1, n + 1), 10.0), dt, hl,
                         low=0.5, high=2.0, min_level=1.0)  # fmt: skip
    assert np.isnan(f[0, : n - 1]).all()
    assert f[0, n - 1] == pytest.approx(1.2) and f[0, n] == pytest.approx(1.2)


def test_factor_is_clamped_and_needs_a_forecast_level():
    st_ = correction.State(np.array([9.0, 0.05, 3.0]), np.array([1.0, 0.01, 3.0]),
                           np.array([0.9, 0.9, 0.9]))  # fmt: skip
    f = correction.factor(st_, low=0.5, high=2.0, min_level=1.0)
    assert f[0] == 2.0  # 9× clamped to max
    assert np.isnan(f[1])  # forecast level 0.011 < one replica's worth: no factor
    assert f[2] == 1.0


def test_a_missing_reading_ages_the_evidence_but_keeps_the_ratio():
    st_ = correction.State(np.array([6.0]), np.array([5.0]), np.array([0.6]))
    after = correction.update(st_, np.array([np.nan]), np.array([5.0]), 600.0, 600.0)
    assert after.weight[0] == pytest.approx(0.3)
    assert after.observed[0] / after.forecast[0] == pytest.approx(1.2)
    assert np.isnan(correction.factor(after, low=0.5, high=2.0, min_level=1.0)[0])


def test_one_reading_after_a_long_pause_is_not_a_half_life_of_evidence():
    st_ = correction.update(correction.State.empty(1), np.array([10.0]), np.array([10.0]),
                            3600.0, 600.0, max_step_seconds=60.0)  # fmt: skip
    assert st_.weight[0] == pytest.approx(1 - 2 ** (-60 / 600))


@settings(max_examples=300, deadline=None)
@given(
    planned=st.integers(1, 50), need=st.floats(0, 80), f=st.floats(0.5, 2.0),
    lower=st.integers(1, 20), ceiling=st.integers(1, 60), keep=st.integers(1, 50),
    nan=st.booleans(),
)  # fmt: skip
def test_corrected_floor_keeps_the_bounds(planned, need, f, lower, ceiling, keep, nan):
    fac = np.nan if nan else f
    out = int(correction.corrected_floor(np.array([planned]), np.array([need]), np.array([fac]),
                                         keep=np.array([keep]), lower=lower,
                                         ceiling=ceiling)[0])  # fmt: skip
    if nan:
        assert out == planned  # no evidence: the plan stands, exactly
        return
    assert out >= lower  # never below the policy's lower bound
    assert out <= max(ceiling, lower)  # never above the ceiling (the lower bound wins)
    assert out >= min(keep, max(ceiling, lower))  # never below what the rule keeps
    want = max(min(max(int(np.ceil(f * need - 1e-9 * f * need)), keep), ceiling), lower)
    assert out == want
