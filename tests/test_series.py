"""Series parsing, validation, gap filling, resampling and the file adapter."""

from __future__ import annotations

import json
import time

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from floorcast.core.series import DEFAULT_MAX_GAP, Series, SeriesError, fill_gaps, resample
from floorcast.core.series_text import (
    detect_format,
    parse_forecast,
    parse_history,
    to_csv_text,
    to_json_text,
)
from floorcast.errors import InputError
from floorcast.sources.files import read_forecast, read_history, write_forecast

T0 = pd.Timestamp("2024-03-04T00:00:00Z")
STEP = pd.Timedelta(minutes=5)


def stamp(i: int, step: pd.Timedelta = STEP) -> str:
    return (T0 + i * step).strftime("%Y-%m-%dT%H:%M:%SZ")


def history_csv(values: list, *, skip: tuple = (), header: str = "timestamp,value") -> str:
    rows = [f"{stamp(i)},{v}" for i, v in enumerate(values) if i not in skip]
    return header + "\n" + "\n".join(rows) + "\n"


def forecast_doc(n: int = 4, **top) -> dict:
    points = [{"t": stamp(i), "value": 2.0 + i, "lower": 1.0 + i, "upper": 3.0 + i}
              for i in range(n)]
    return {"unit": "cores", "step": "5m", "generated": stamp(-1), "points": points, **top}


def rejects(text: str, row: int | None, *words: str, kind: str = "row", parse=parse_history,
            source: str = "load.csv", **kw) -> SeriesError:
    """Parse must fail with a SeriesError whose message names source, row and problem."""
    with pytest.raises(SeriesError) as info:
        parse(text, source=source, **kw)
    err = info.value
    assert isinstance(err, InputError)
    msg = str(err)
    assert msg.startswith(source), msg
    if row is not None:
        assert err.row == row and msg.startswith(f"{source}, {kind} {row}: "), msg
    for w in words:
        assert w in msg, msg
    return err


# --------------------------------------------------------------------- one per rejection


def test_rejects_nan() -> None:
    rejects(history_csv([1, 2, "nan", 4]), 4, "NaN")


def test_rejects_inf() -> None:
    rejects(history_csv([1, "inf", 3]), 3, "infinite")


def test_rejects_negative_load() -> None:
    rejects(history_csv([1, 2, 3, -0.5]), 5, "negative")


def test_rejects_non_numeric_and_missing_value() -> None:
    rejects(history_csv([1, "1.2.3", 3]), 3, "'1.2.3' is not a number")
    rejects(history_csv([1, 2, ""]), 4, "missing value")


def test_rejects_unparseable_timestamp() -> None:
    text = "timestamp,value\n" + stamp(0) + ",1\n" + "yesterday noon,2\n" + stamp(2) + ",3\n"
    rejects(text, 3, "'yesterday noon'", "RFC 3339")
    rejects(history_csv([1, 2]).replace(stamp(1), "2024-02-30T00:00:00Z"), 3, "valid date")


def test_rejects_timestamp_without_offset() -> None:
    text = history_csv([1, 2, 3]).replace(stamp(2), stamp(2)[:-1])
    rejects(text, 4, "no UTC offset")


def test_rejects_unsorted() -> None:
    text = "timestamp,value\n" + "\n".join(f"{stamp(i)},1" for i in (0, 1, 3, 2)) + "\n"
    rejects(text, 5, "earlier than row 4", "sorted")


def test_rejects_duplicate() -> None:
    text = "timestamp,value\n" + "\n".join(f"{stamp(i)},1" for i in (0, 1, 1, 2)) + "\n"
    rejects(text, 4, "duplicate timestamp", "row 3")


def test_rejects_irregular_step_beyond_tolerance() -> None:
    text = history_csv([1] * 6).replace(stamp(4), (T0 + 4 * STEP + pd.Timedelta("40s"))
                                        .strftime("%Y-%m-%dT%H:%M:%SZ"))
    rejects(text, 6, "irregular step", "40s off", "5m grid")
    # the same 40 s is inside a tolerance of 0.2 x 5 m = 60 s, and snaps to the grid
    s = parse_history(text, source="load.csv", step_tolerance=0.2)
    assert s.start == T0 and s.step == STEP and len(s) == 6


def test_rejects_empty_and_header_only() -> None:
    rejects("", 1, "empty")
    rejects("\n  \n", 1, "empty")
    rejects("timestamp,value\n", 2, "no data rows")
    rejects("", 1, "empty", kind="line", source="f.json", parse=parse_forecast)


@pytest.mark.parametrize(
    ("header", "words"),
    [
        ("time,value", ["unexpected column 'time'"]),
        ("timestamp", ["missing column 'value'"]),
        ("timestamp,value,extra", ["unexpected column 'extra'"]),
        ("timestamp,value,lower,upper", ["unexpected column 'lower'"]),  # history: two only
        ("value,timestamp", ["out of order"]),
        (stamp(0) + ",1", ["missing header line"]),
    ],
)
def test_rejects_wrong_history_header(header: str, words: list) -> None:
    rejects(header + "\n" + stamp(1) + ",1\n" + stamp(2) + ",1\n", 1, *words)


def test_rejects_wrong_forecast_header() -> None:
    text = "timestamp,value,lower\n" + stamp(0) + ",1,1\n"
    rejects(text, 1, "'lower' and 'upper' must be given together", parse=parse_forecast)
    rejects("timestamp,value,upper,lower\n", 1, "out of order", parse=parse_forecast)


def test_rejects_wrong_number_of_cells_in_a_row() -> None:
    text = history_csv([1, 2, 3]).replace(f"{stamp(1)},2", f"{stamp(1)},2,7")
    rejects(text, 3, "expected 2 columns", "found 3")


def test_rejects_bands_out_of_order() -> None:
    head = "timestamp,value,lower,upper\n"
    text = head + f"{stamp(0)},2,1,3\n{stamp(1)},2,2.5,3\n"
    rejects(text, 3, "lower bound 2.5 is above the value 2", parse=parse_forecast)
    text = head + f"{stamp(0)},2,1,3\n{stamp(1)},2,1,3\n{stamp(2)},4,1,3\n"
    rejects(text, 4, "value 4 is above the upper bound 3", parse=parse_forecast)
    doc = forecast_doc()
    doc["points"][2]["lower"] = 99
    rejects(json.dumps(doc), 2, "lower bound 99", kind="point", source="f.json",
            parse=parse_forecast)


def test_rejects_json_step_that_is_not_a_duration() -> None:
    err = rejects(json.dumps(forecast_doc(step="five minutes")), None, "'step'",
                  "not a duration", source="f.json", parse=parse_forecast)
    assert err.row is None


def test_rejects_json_step_disagreeing_with_timestamps() -> None:
    rejects(json.dumps(forecast_doc(step="10m")), 1, "declared step '10m'", "5m",
            kind="point", source="f.json", parse=parse_forecast)


def test_rejects_over_max_bytes_with_size_and_limit() -> None:
    text = history_csv([1.0] * 200)
    size = len(text.encode())
    err = rejects(text, None, f"{size} bytes", "limit of 1000 bytes", max_bytes=1000)
    assert err.row is None
    assert parse_history(text, source="load.csv", max_bytes=size).values.shape == (200,)


def test_rejects_history_gap_over_max_gap_naming_both_rows() -> None:
    # 5 m step, samples 1..7 missing: a 35 m hole, over the default 30 m
    text = history_csv(list(range(10)), skip=tuple(range(1, 8)))
    rejects(text, 3, "gap of 35m", "7 missing", f"row 2 ({stamp(0)})", f"row 3 ({stamp(8)})",
            "max gap of 30m")


def test_rejects_any_gap_in_a_forecast() -> None:
    doc = forecast_doc(6)
    del doc["points"][3]
    rejects(json.dumps(doc), 3, "gap of 5m", "point 2", "gap-free", kind="point",
            source="f.json", parse=parse_forecast)


def test_rejects_json_shapes() -> None:
    src = {"source": "f.json", "parse": parse_forecast}
    rejects('{"points": [\n  {"t": 1},\n]}', 3, "invalid JSON", kind="line", **src)
    doc = forecast_doc()
    doc["points"][1]["value"] = "3"
    rejects(json.dumps(doc), 1, "'3' is not a number", kind="point", **src)
    doc = forecast_doc()
    doc["points"][2]["uper"] = 1
    rejects(json.dumps(doc), 2, "unknown key 'uper'", kind="point", **src)
    doc = forecast_doc()
    del doc["points"][1]["upper"]
    rejects(json.dumps(doc), 1, "together", kind="point", **src)
    rejects(json.dumps(forecast_doc(genrated="x")), None, "unknown field 'genrated'", **src)
    rejects(json.dumps(forecast_doc(generated="2024-03-04T00:00:00")), None, "no UTC offset",
            **src)
    rejects(json.dumps({"points": []}), None, "non-empty", **src)
    doc = forecast_doc()
    doc["points"][3]["value"] = float("nan")  # json.dumps writes the NaN literal
    rejects(json.dumps(doc), 3, "NaN", kind="point", **src)


def test_rejects_mix_of_offset_and_naive_times() -> None:
    text = history_csv([1, 2, 3]).replace(stamp(1), "2024-03-04T00:05:00")
    rejects(text, 3, "no UTC offset")


def test_reports_earliest_bad_row_across_columns() -> None:
    text = history_csv([1, 2, -3, 4]).replace(stamp(1), "not-a-time")
    rejects(text, 3, "not-a-time")


# --------------------------------------------------------------------- accepted inputs


def test_offsets_normalise_to_utc() -> None:
    text = ("timestamp,value\n2024-03-04T02:00:00+02:00,1\n2024-03-03T19:05:00-05:00,2\n"
            "2024-03-04t00:10:00z,3\n2024-03-04 00:15:00.000Z,4\n")
    s = parse_history(text, source="tz.csv")
    assert s.start == T0 and str(s.start.tz) == "UTC"
    assert list(s.times) == [T0 + i * STEP for i in range(4)]
    assert s.values.tolist() == [1, 2, 3, 4]


def test_jitter_within_tolerance_snaps_to_grid() -> None:
    rng = np.random.default_rng(3)
    jitter = rng.integers(-25, 26, size=60)  # seconds, within 0.1 x 5 m = 30 s
    rows = [f"{(T0 + i * STEP + pd.Timedelta(seconds=int(j))).isoformat()},{i}"
            for i, j in enumerate(jitter)]
    s = parse_history("timestamp,value\n" + "\n".join(rows), source="j.csv")
    assert s.start == T0 and s.step == STEP and s.filled is None
    assert (s.times == pd.date_range(T0, periods=60, freq="5min")).all()
    few = [f"{(T0 + i * STEP + pd.Timedelta(seconds=j)).isoformat()},1"
           for i, j in enumerate([0, 2, -1, 1, 0, -2])]
    assert parse_history("timestamp,value\n" + "\n".join(few), source="j.csv").step == STEP


def test_blank_lines_keep_file_line_numbers() -> None:
    text = "timestamp,value\n\n" + stamp(0) + ",1\r\n\n" + stamp(1) + ",x\n"
    rejects(text, 5, "'x' is not a number")


def test_linear_gap_fill_by_hand() -> None:
    s = parse_history(history_csv([1.0, 0, 0, 7.0, 9.0], skip=(1, 2)), source="g.csv")
    assert s.values.tolist() == [1.0, 3.0, 5.0, 7.0, 9.0]  # 1 -> 7 over three steps
    assert s.filled.tolist() == [False, True, True, False, False]
    assert s.start == T0 and len(s) == 5


def test_ffill_gap_fill() -> None:
    s = parse_history(history_csv([1.0, 0, 0, 7.0, 8.0], skip=(1, 2)), source="g.csv",
                      gap_fill="ffill")
    assert s.values.tolist() == [1.0, 1.0, 1.0, 7.0, 8.0]
    assert s.filled.tolist() == [False, True, True, False, False]


def test_gap_exactly_max_gap_is_filled_one_more_is_not() -> None:
    assert pd.Timedelta(minutes=30) == DEFAULT_MAX_GAP
    ok = parse_history(history_csv(list(range(9)), skip=tuple(range(1, 7))), source="g.csv")
    assert int(ok.filled.sum()) == 6 and ok.values.tolist() == list(map(float, range(9)))
    rejects(history_csv(list(range(10)), skip=tuple(range(1, 8))), 3, "gap of 35m")
    big = parse_history(history_csv(list(range(10)), skip=tuple(range(1, 8))), source="g.csv",
                        max_gap=None)
    assert int(big.filled.sum()) == 7 and big.values.tolist() == list(map(float, range(10)))
    rejects(history_csv([1, 2, 3, 4], skip=(1,)), 3, "gap of 5m", max_gap=pd.Timedelta(0))


def test_fill_gaps_helper() -> None:
    slots = np.array([0, 3, 4])
    assert fill_gaps(slots, np.array([0.0, 3.0, 10.0])).tolist() == [0, 1, 2, 3, 10]
    assert fill_gaps(slots, np.array([0.0, 3.0, 10.0]), "ffill").tolist() == [0, 0, 0, 3, 10]
    with pytest.raises(InputError):
        fill_gaps(slots, np.zeros(3), "cubic")


def test_round_trip_csv() -> None:
    v = np.array([0.0, 1.5, 1e-9, 123456.789, 2 / 3])
    s = Series(start=T0, step=STEP, values=v, lower=v * 0.5, upper=v * 2, source="x")
    back = parse_forecast(to_csv_text(s), source="x.csv")
    assert back == s and back.source == "x.csv"
    assert to_csv_text(s).splitlines()[:2] == ["timestamp,value,lower,upper",
                                               f"{stamp(0)},0.0,0.0,0.0"]


def test_round_trip_json_keeps_unit_generated_meta() -> None:
    v = np.array([3.0, 1.25, 0.1])
    s = Series(start=T0, step=pd.Timedelta("90s"), values=v, lower=v - 0.05, upper=v + 1,
               unit="cores", generated=T0 - pd.Timedelta("1h"),
               meta={"method": "fourier", "scores": {"mase": np.float64(0.8), "n": np.int64(3)}})
    text = to_json_text(s)
    doc = json.loads(text)
    assert doc["step"] == "1m30s" and doc["generated"] == "2024-03-03T23:00:00Z"
    assert doc["meta"]["scores"] == {"mase": 0.8, "n": 3}
    back = parse_forecast(text, source="x.json")
    assert back == s and back.unit == "cores" and back.generated == T0 - pd.Timedelta("1h")


def test_history_accepts_the_json_shape() -> None:
    doc = {"step": "5m", "points": [{"t": stamp(i), "value": i} for i in (0, 1, 3)]}
    s = parse_history(json.dumps(doc), source="h.json")
    assert s.values.tolist() == [0.0, 1.0, 2.0, 3.0] and s.filled.tolist()[2]


def test_detect_format() -> None:
    assert detect_format("timestamp,value", "a/b.JSON") == "json"
    assert detect_format("{}", "a.csv") == "csv"
    assert detect_format('  {"points": []}', "configmap default/fc key data") == "json"
    assert detect_format("timestamp,value\n", "stdin") == "csv"


def test_series_helpers() -> None:
    v = np.arange(6.0)
    s = Series(start=T0, step=STEP, values=v)
    assert s.end == T0 + 5 * STEP and len(s) == 6
    part = s.slice(T0 + STEP, T0 + 3 * STEP)  # half-open: samples 1 and 2
    assert part.values.tolist() == [1.0, 2.0] and part.start == T0 + STEP
    assert s.slice(T0 + pd.Timedelta("1m")).start == T0 + STEP  # rounds up to the grid
    assert len(s.slice(T0 + 10 * STEP)) == 0
    assert s.upper_or_value() is s.values
    banded = Series(start=T0, step=STEP, values=v, lower=v, upper=v + 1)
    assert banded.upper_or_value().tolist() == (v + 1).tolist()
    with pytest.raises(ValueError):
        s.values[0] = 5.0  # read-only: slices share memory
    with pytest.raises(ValueError, match="negative"):
        Series(start=T0, step=STEP, values=[1.0, -1.0])
    with pytest.raises(ValueError, match="no UTC offset"):
        Series(start=pd.Timestamp("2024-01-01"), step=STEP, values=[1.0])


# --------------------------------------------------------------------- resampling


def _pandas_series(s: Series) -> pd.Series:
    return pd.Series(s.values, index=s.times)


def test_resample_down_mean_and_max_by_hand_and_against_pandas() -> None:
    v = np.array([1.0, 2.0, 6.0, 4.0, 5.0, 0.0, 7.0])  # 00:00 .. 00:30 every 5 m
    s = Series(start=T0, step=STEP, values=v)
    mean = resample(s, pd.Timedelta("15min"))
    assert mean.start == T0 and mean.step == pd.Timedelta("15min")
    assert mean.values.tolist() == [3.0, 3.0, 7.0]  # (1+2+6)/3, (4+5+0)/3, partial bin 7
    assert resample(s, pd.Timedelta("15min"), "max").values.tolist() == [6.0, 5.0, 7.0]
    # reference: pandas' own resample with the same epoch-aligned, left-labelled bins
    for how in ("mean", "max"):
        ref = getattr(_pandas_series(s).resample("15min", origin="epoch"), how)()
        ours = resample(s, pd.Timedelta("15min"), how)
        assert (ours.times == ref.index).all()
        np.testing.assert_allclose(ours.values, ref.to_numpy())


def test_resample_up_interpolates_by_hand_and_against_pandas() -> None:
    s = Series(start=T0, step=pd.Timedelta("10min"), values=[0.0, 10.0, 4.0],
               filled=[False, True, False])
    up = resample(s, STEP, "max")  # upsampling always interpolates
    assert up.values.tolist() == [0.0, 5.0, 10.0, 7.0, 4.0] and up.step == STEP
    assert up.filled.tolist() == [False, True, True, True, False]
    # reference: pandas' resample().interpolate() on the same input
    ref = _pandas_series(s).resample("5min", origin="epoch").interpolate()
    np.testing.assert_allclose(up.values, ref.to_numpy())
    assert (up.times == ref.index).all()


def test_resample_keeps_bands_ordered_and_rejects_bad_method() -> None:
    v = np.array([1.0, 3.0, 2.0, 8.0])
    s = Series(start=T0, step=STEP, values=v, lower=v / 2, upper=v * 2, unit="rps")
    down = resample(s, pd.Timedelta("10min"))
    assert down.lower.tolist() == [1.0, 2.5] and down.upper.tolist() == [4.0, 10.0]
    assert down.unit == "rps"
    point = resample(s, pd.Timedelta("10min"), "interpolate")
    assert point.values.tolist() == [1.0, 2.0]
    with pytest.raises(InputError):
        resample(s, STEP, "median")


# --------------------------------------------------------------------- properties, speed


_steps = st.sampled_from([pd.Timedelta(s) for s in ("1s", "30s", "1min", "5min", "1h", "1D")])
_load = st.floats(min_value=0, max_value=1e12, allow_nan=False, allow_infinity=False)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(values=st.lists(_load, min_size=2, max_size=40), step=_steps,
       offset=st.integers(0, 3 * 10**9), banded=st.booleans(), scale=st.floats(0, 0.5))
def test_property_round_trip(values: list, step: pd.Timedelta, offset: int, banded: bool,
                             scale: float) -> None:
    v = np.array(values)
    start = pd.Timestamp("2020-01-01T00:00:00Z") + pd.Timedelta(seconds=offset)  # off-grid too
    bands = {"lower": v * (1 - scale), "upper": v * (1 + scale)} if banded else {}
    s = Series(start=start, step=step, values=v, unit="cores", **bands)
    assert parse_forecast(to_json_text(s), source="p.json") == s
    from_csv = parse_forecast(to_csv_text(s), source="p.csv")
    assert from_csv == Series(start=start, step=step, values=v, **bands)


def test_hundred_thousand_rows_parse_quickly() -> None:
    n = 100_000
    v = np.random.default_rng(1).random(n) * 40
    text = to_csv_text(Series(start=T0, step=pd.Timedelta("1min"), values=v))
    t0 = time.perf_counter()
    s = parse_history(text, source="big.csv")
    elapsed = time.perf_counter() - t0
    assert len(s) == n and np.array_equal(s.values, v)
    assert elapsed < 3.0, f"100k rows took {elapsed:.2f}s"  # ~0.3 s on an idle laptop


# --------------------------------------------------------------------- file adapter


def test_files_round_trip_and_errors(tmp_path) -> None:
    v = np.array([1.0, 2.0, 3.0])
    s = Series(start=T0, step=STEP, values=v, lower=v, upper=v + 1, unit="cores",
               generated=T0, meta={"method": "seasonal-naive"})
    write_forecast(s, tmp_path / "f.json")
    assert read_forecast(tmp_path / "f.json") == s
    write_forecast(s, tmp_path / "f.csv")
    assert read_forecast(tmp_path / "f.csv").upper.tolist() == [2.0, 3.0, 4.0]
    assert read_history(tmp_path / "f.json").values.tolist() == v.tolist()
    with pytest.raises(InputError, match=r"unknown output format '\.txt'"):
        write_forecast(s, tmp_path / "f.txt")
    missing = tmp_path / "nope.csv"
    with pytest.raises(InputError, match="file not found") as info:
        read_history(missing)
    assert str(info.value).startswith(str(missing))
    with pytest.raises(InputError, match="does not exist"):
        write_forecast(s, tmp_path / "no" / "f.csv")
    (tmp_path / "big.csv").write_text(history_csv([1.0] * 100))
    with pytest.raises(InputError, match="over the limit of 100 bytes"):
        read_history(tmp_path / "big.csv", max_bytes=100)
    (tmp_path / "bad.csv").write_text(history_csv([1, "x"]))
    with pytest.raises(SeriesError, match=r"bad\.csv, row 3: value 'x'"):
        read_history(tmp_path / "bad.csv")
