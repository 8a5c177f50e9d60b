"""Forecast quantiles: the CSV/JSON format (docs/formats.md, "Quantiles"), the Series
that carries them, and reading a level between them (docs/policy.md, "serviceLevel")."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from floorcast.core.quantiles import quantile_at
from floorcast.core.series import Series, resample
from floorcast.core.series_text import parse_forecast, to_csv_text, to_json_text
from floorcast.errors import InputError

T0, T1 = "2027-01-08T13:00:00Z", "2027-01-08T13:05:00Z"
LEVELS = (0.5, 0.8, 0.95, 0.99)


def _series(n: int = 6, bands: bool = True) -> Series:
    v = np.linspace(1.0, 3.0, n)
    q = np.array([v, v * 1.1, v * 1.25, v * 1.5])
    extra = {"lower": v * 0.8, "upper": v * 1.25} if bands else {}
    return Series(start=pd.Timestamp(T0), step="5min", values=v, levels=LEVELS, quantiles=q,
                  unit="cores", **extra)  # fmt: skip


@pytest.mark.parametrize("bands", [True, False])
@pytest.mark.parametrize("write", [to_csv_text, to_json_text])
def test_round_trip(write, bands: bool) -> None:
    s = _series(bands=bands)
    back = parse_forecast(write(s), source="f." + ("csv" if write is to_csv_text else "json"))
    assert back.levels == LEVELS
    assert np.array_equal(back.quantiles, s.quantiles)
    assert (back.upper is None) == (not bands)
    assert np.array_equal(back.values, s.values)


def test_files_without_quantiles_read_as_before() -> None:
    for text in (
        f"timestamp,value\n{T0},1\n{T1},2\n",
        f"timestamp,value,lower,upper\n{T0},1,0.5,2\n{T1},2,1,3\n",
        json.dumps({"points": [{"t": T0, "value": 1}, {"t": T1, "value": 2}]}),
    ):
        s = parse_forecast(text, source="f.json" if text.startswith("{") else "f.csv")
        assert s.quantiles is None and s.levels == ()
        # and they write out without any quantile column or key
        assert "q0" not in to_csv_text(s) and "quantiles" not in to_json_text(s)


def test_levels_in_any_order_are_held_increasing() -> None:
    s = parse_forecast(f"timestamp,value,q0.9,q0.5\n{T0},1,3,2\n{T1},1,4,1\n", source="f.csv")
    assert s.levels == (0.5, 0.9)
    assert s.quantiles.tolist() == [[2.0, 1.0], [3.0, 4.0]]


def _csv(header: str, *rows: str) -> str:
    return "\n".join([header, *rows]) + "\n"


def _json(*quantiles: object, extra: dict | None = None) -> str:
    pts = []
    for i, q in enumerate(quantiles):
        p = {"t": [T0, T1][i], "value": 1.0}
        if q is not None:
            p["quantiles"] = q
        pts.append(p | (extra or {}))
    return json.dumps({"points": pts})


@pytest.mark.parametrize(
    ("text", "fmt", "where", "says"),
    [
        (_csv("timestamp,value,q1.5", f"{T0},1,1", f"{T1},1,1"), "csv", "row 1",
         "column 'q1.5': quantile level 1.5 is outside (0, 1)"),
        (_csv("timestamp,value,q0", f"{T0},1,1", f"{T1},1,1"), "csv", "row 1", "outside (0, 1)"),
        (_csv("timestamp,value,q95", f"{T0},1,1", f"{T1},1,1"), "csv", "row 1", "outside (0, 1)"),
        (_csv("timestamp,value,qabc", f"{T0},1,1", f"{T1},1,1"), "csv", "row 1",
         "not a quantile level"),
        (_csv("timestamp,value,q0.5,q0.50", f"{T0},1,1,1", f"{T1},1,1,1"), "csv", "row 1",
         "column 'q0.50' repeats quantile level 0.5 (column 'q0.5')"),
        (_csv("timestamp,value,q0.5,q0.9", f"{T0},1,1,2", f"{T1},1,3,2"), "csv", "row 3",
         "quantile 0.9 (2) is below quantile 0.5 (3)"),
        (_csv("timestamp,value,q0.5,q0.9", f"{T0},1,1,2", f"{T1},1,nan,2"), "csv", "row 3",
         "quantile 0.5 is NaN"),
        (_csv("timestamp,value,q0.5,q0.9", f"{T0},1,1,2", f"{T1},1,1,-2"), "csv", "row 3",
         "quantile 0.9 -2 is negative"),
        (_csv("timestamp,value,q0.5", f"{T0},1,1,7", f"{T1},1,1"), "csv", "row 2",
         "expected 3 columns"),
        (_csv("timestamp,value,q0.5,lower,upper", f"{T0},1,1,1,1"), "csv", "row 1",
         "unexpected column 'q0.5'"),
        (_csv("timestamp,value," + ",".join(f"q{i / 100:g}" for i in range(1, 34)),
              f"{T0},1" + ",1" * 33), "csv", "row 1", "33 quantile levels, over the limit of 32"),
        (_json({"0.5": 1}, {"0.9": 1}), "json", "point 1", "extra level '0.9'"),
        (_json({"0.5": 1, "0.9": 2}, {"0.5": 1}), "json", "point 1", "missing level '0.9'"),
        (_json({"0.5": 1}, None), "json", "point 1", "'quantiles' missing"),
        (_json(None, {"0.5": 1}), "json", "point 0", "'quantiles' missing"),
        (_json({"0.5": 1, "0.50": 2}, {"0.5": 1, "0.50": 2}), "json", "point 0",
         "repeats quantile level 0.5"),
        (_json({"1.2": 1}, {"1.2": 1}), "json", "point 0", "outside (0, 1)"),
        (_json({"0.5": "1"}, {"0.5": 1}), "json", "point 0", "quantile 0.5 '1' is not a number"),
        (_json({"0.5": 2, "0.9": 1}, {"0.5": 1, "0.9": 2}), "json", "point 0",
         "quantile 0.9 (1) is below quantile 0.5 (2)"),
        (_json([1, 2], [1, 2]), "json", "point 0", "expected an object of levels"),
        (_json({}, {}), "json", "point 0", "'quantiles' is empty"),
        # json.dumps cannot write a repeated key, so this one is spelled out.
        ('{"points": [{"t": "' + T0 + '", "value": 1, "quantiles": {"0.5": 1, "0.5": 2}}]}',
         "json", "point 0", "quantile level '0.5' given twice"),
        ('{"points": [{"t": "' + T0 + '", "value": 1, "value": 2, "quantiles": {"0.5": 1}}]}',
         "json", "point 0", "key 'value' given twice"),
        ('{"points": [{"t": "' + T0 + '", "value": 1, "quantiles": {"0.5": NaN}}]}', "json",
         "point 0", "quantile 0.5 is NaN"),
    ],
)  # fmt: skip
def test_bad_quantiles_name_file_row_and_field(text: str, fmt: str, where: str, says: str) -> None:
    with pytest.raises(InputError) as e:
        parse_forecast(text, source=f"fc.{fmt}")
    assert str(e.value).startswith(f"fc.{fmt}, {where}: "), str(e.value)
    assert says in str(e.value)


def test_quantile_columns_are_not_history() -> None:
    from floorcast.core.series_text import parse_history

    with pytest.raises(InputError, match=r"unexpected column 'q0\.5'"):
        parse_history(_csv("timestamp,value,q0.5", f"{T0},1,1", f"{T1},1,1"), source="h.csv")


def test_series_slices_and_resamples_its_quantiles() -> None:
    s = _series(n=12)
    cut = s.slice(s.times[3], s.times[7])
    assert np.array_equal(cut.quantiles, s.quantiles[:, 3:7])
    coarse = resample(s, pd.Timedelta("10min"), "mean")
    # Reference: pandas' own epoch-aligned mean resample of each level's row.
    for j in range(len(LEVELS)):
        ref = pd.Series(s.quantiles[j], index=s.times).resample("10min", origin="epoch").mean()
        assert np.allclose(coarse.quantiles[j], ref.to_numpy())


def test_series_refuses_unusable_quantiles() -> None:
    v = np.ones(3)
    with pytest.raises(ValueError, match="decrease"):
        Series(start=pd.Timestamp(T0), step="5min", values=v, levels=(0.5, 0.9),
               quantiles=np.array([v * 2, v]))  # fmt: skip
    with pytest.raises(ValueError, match="strictly increasing"):
        Series(start=pd.Timestamp(T0), step="5min", values=v, levels=(0.9, 0.5),
               quantiles=np.array([v, v]))  # fmt: skip


@settings(max_examples=200, deadline=None)
@given(
    level=st.floats(0.3, 0.9999),
    base=st.lists(st.floats(0, 100), min_size=3, max_size=3),
)
def test_quantile_at_is_numpy_interp_per_point(level: float, base: list[float]) -> None:
    b = np.array(base)
    q = np.array([b, b + 1, b * 1.5 + 2, b * 2 + 5])  # monotone across levels
    line, got = quantile_at(LEVELS, q, level)
    # Reference: numpy.interp clamps to the end values outside xp, linear inside.
    ref = [np.interp(level, LEVELS, q[:, i]) for i in range(3)]
    assert np.allclose(line, ref)
    assert got.clamped == (not LEVELS[0] <= level <= LEVELS[-1])
    assert got.level == min(max(level, LEVELS[0]), LEVELS[-1])
