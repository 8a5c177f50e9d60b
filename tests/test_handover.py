"""Cross-fade from an old forecast to a new one: no step that neither forecast contains."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from floorcast.core.forecasting.handover import blend, crossfade, ramp
from floorcast.core.series import Series
from floorcast.errors import InputError

T0 = pd.Timestamp("2026-05-04T08:00:00Z")
STEP = pd.Timedelta("5min")


def fc(values, start=T0, band=None, step=STEP, generated=None) -> Series:
    v = np.asarray(values, dtype=float)
    lo = hi = None
    if band is not None:
        lo, hi = np.maximum(v - band, 0), v + band
    return Series(start=start, step=step, values=v, lower=lo, upper=hi, generated=generated)


def test_ramp_is_linear_from_zero_to_one():
    assert np.allclose(ramp(6, 4), [0, 0.25, 0.5, 0.75, 1, 1])
    assert np.array_equal(ramp(3, 0), [1, 1, 1])


def test_crossfade_starts_at_old_and_ends_at_new():
    old = fc(np.full(30, 10.0), start=T0 - 6 * STEP, generated=T0 - pd.Timedelta("30min"))
    new = fc(np.full(24, 20.0))
    out = crossfade(old, new, overlap=pd.Timedelta("20min"))  # 4 steps
    assert out.start == new.start and len(out) == len(new)
    assert np.allclose(out.values[:6], [10, 12.5, 15, 17.5, 20, 20])
    assert np.array_equal(out.values[4:], new.values[4:])
    assert out.meta["handover"]["overlap_steps"] == 4
    assert out.meta["handover"]["from_generated"].startswith("2026-05-04T07:30")


def test_ramp_shortens_when_the_old_forecast_ends_inside_the_overlap():
    old = fc(np.full(3, 10.0))  # covers 3 instants of the new grid
    new = fc(np.full(10, 16.0))
    out = crossfade(old, new, overlap=6)
    assert np.allclose(out.values[:4], [10, 13, 16, 16])  # ramp of 2 steps, then new
    assert out.meta["handover"]["overlap_steps"] == 2


def test_nothing_to_hand_over_returns_the_new_forecast():
    new = fc(np.arange(10.0))
    assert crossfade(None, new, overlap=4) is new
    later = fc(np.ones(10), start=T0 + STEP)  # does not cover the new start
    assert crossfade(later, new, overlap=4) is new
    assert crossfade(fc(np.ones(10)), new, overlap=0) is new
    with pytest.raises(InputError):
        crossfade(fc(np.ones(10)), new, overlap=-1)


def test_bands_are_blended_and_stay_ordered():
    old = fc(np.full(12, 10.0), band=2.0)
    new = fc(np.full(12, 30.0), band=6.0)
    out = crossfade(old, new, overlap=4)
    assert out.lower[0] == 8.0 and out.upper[0] == 12.0
    assert out.lower[4] == 24.0 and out.upper[4] == 36.0
    assert np.all(out.lower <= out.values) and np.all(out.values <= out.upper)
    plain_old = crossfade(fc(np.full(12, 10.0)), new, overlap=4)  # old without bands
    assert plain_old.lower[0] == 10.0 and plain_old.upper[0] == 10.0
    no_band_new = crossfade(old, fc(np.full(12, 30.0)), overlap=4)
    assert no_band_new.lower is None


def test_old_forecast_on_an_offset_grid_is_interpolated():
    old = fc([10.0, 20.0, 30.0, 40.0], start=T0 - STEP / 2)  # 07:57:30, 08:02:30, ...
    new = fc(np.full(6, 100.0))
    out = crossfade(old, new, overlap=2)
    assert out.values[0] == pytest.approx(15.0)  # old read between its samples


finite = st.floats(0, 1e6, allow_nan=False, allow_infinity=False)


@settings(max_examples=200, deadline=None)
@given(
    data=st.data(),
    n_new=st.integers(1, 40),
    lead=st.integers(0, 10),
    overlap=st.integers(0, 30),
)
def test_every_blended_value_lies_between_old_and_new(data, n_new, lead, overlap):
    # old starts `lead` steps before the new forecast and may end anywhere after it
    n_old = data.draw(st.integers(lead + 1, lead + 50))
    old_v = np.array(data.draw(st.lists(finite, min_size=n_old, max_size=n_old)))
    new_v = np.array(data.draw(st.lists(finite, min_size=n_new, max_size=n_new)))
    old = fc(old_v, start=T0 - lead * STEP)
    new = fc(new_v)
    out = crossfade(old, new, overlap=overlap)
    shared = min(n_new, n_old - lead)
    o = old_v[lead : lead + shared]
    got = out.values[:shared]
    assert np.all(got >= np.minimum(o, new_v[:shared]))
    assert np.all(got <= np.maximum(o, new_v[:shared]))
    assert np.array_equal(out.values[shared:], new_v[shared:])
    ramp_len = min(overlap, shared - 1)
    if ramp_len > 0:
        assert out.values[0] == o[0]  # at the start: the old forecast
        assert np.array_equal(out.values[ramp_len:], new_v[ramp_len:])  # after: the new
    else:
        assert np.array_equal(out.values, new_v)


@given(st.lists(st.tuples(finite, finite, st.floats(0, 1)), min_size=1, max_size=20))
def test_blend_is_a_convex_combination(triples):
    o, n, w = (np.array(x) for x in zip(*triples, strict=True))
    b = blend(o, n, w)
    assert np.all(b >= np.minimum(o, n)) and np.all(b <= np.maximum(o, n))
    assert np.array_equal(b[w == 0], o[w == 0]) and np.array_equal(b[w == 1], n[w == 1])
