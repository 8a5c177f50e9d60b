"""`floorcast forecast`: files, folders and a real Prometheus in; forecasts out."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_run import run

from floorcast import scenario
from floorcast.core.series_text import parse_forecast


@pytest.fixture(scope="module")
def history(tmp_path_factory) -> Path:
    p = tmp_path_factory.mktemp("hist") / "storefront.csv"
    p.write_text(scenario.history_csv("storefront", step="5min"))
    return p


def test_forecast_file_to_json_with_bands_and_provenance(history, tmp_path, capsys):
    out = tmp_path / "fc.json"
    code, _, err = run(
        ["forecast", "--history", str(history), "--method", "seasonal-naive", "--season", "1d",
         "--horizon", "12h", "--output", str(out), "--generated", "2026-11-30T00:00:00Z"],
        capsys,
    )  # fmt: skip
    assert code == 0, err
    fc = parse_forecast(out.read_text(), source=str(out))
    # One step after the history ends (14 days from 2026-11-16), 12 h at 5 minutes.
    assert fc.start == pd.Timestamp("2026-11-30T00:00:00Z") and len(fc) == 144
    assert fc.generated == pd.Timestamp("2026-11-30T00:00:00Z")
    assert np.all(fc.lower <= fc.values) and np.all(fc.values <= fc.upper)
    doc = json.loads(out.read_text())
    assert doc["meta"]["method"] == "seasonal-naive" and doc["meta"]["season"] == 288


def test_forecast_auto_records_the_choice_and_scores(history, tmp_path, capsys):
    out = tmp_path / "fc.csv"
    code, stdout, err = run(
        ["forecast", "--history", str(history), "--horizon", "6h", "--output", str(out),
         "--evaluate", "--json",
         "--exclude", "2026-11-27T18:00:00Z/2026-11-27T22:00:00Z"],
        capsys,
    )  # fmt: skip
    assert code == 0, err
    doc = json.loads(stdout)["storefront"]
    scores = doc["scores"]
    assert doc["chosen"] in scores
    # auto picks the lowest MASE among the methods it could evaluate.
    finite = {m: s["mase"] for m, s in scores.items() if s.get("mase") is not None}
    assert doc["chosen"] == min(finite, key=finite.get)
    # The default quantile levels follow the band (docs/formats.md, "Quantiles").
    assert out.read_text().startswith("timestamp,value,lower,upper,q0.5,q0.8,q0.9,q0.95,q0.99\n")


def test_batch_folder(tmp_path, capsys):
    src = tmp_path / "hist"
    src.mkdir()
    for svc in ("storefront", "search", "reports"):
        (src / f"{svc}.csv").write_text(scenario.history_csv(svc, step="5min"))
    dst = tmp_path / "out"
    code, _, err = run(
        ["forecast", "--history-dir", str(src), "--output-dir", str(dst), "--method", "fourier",
         "--horizon", "2h"],
        capsys,
    )  # fmt: skip
    assert code == 0, err
    assert sorted(p.name for p in dst.iterdir()) == [
        "reports.json",
        "search.json",
        "storefront.json",
    ]
    fc = parse_forecast((dst / "search.json").read_text(), source="search.json")
    assert len(fc) == 24 and fc.values.max() > 0


def test_forecast_from_a_real_prometheus(prometheus_server, tmp_path, capsys):
    h = prometheus_server.history
    end = pd.Timestamp(h.end, unit="s", tz="UTC").strftime("%Y-%m-%dT%H:%M:%SZ")
    out = tmp_path / "prom.json"
    code, _, err = run(
        ["forecast", "--prometheus", prometheus_server.url,
         "--query", 'demo_load{service="search"}', "--lookback", "2d", "--step", "5m",
         "--end", end, "--method", "seasonal-naive", "--season", "1d", "--horizon", "1h",
         "--output", str(out)],
        capsys,
    )  # fmt: skip
    assert code == 0, err
    fc = parse_forecast(out.read_text(), source=str(out))
    # The harness' series is a daily sine: seasonal naive repeats yesterday's values
    # (search is service index 1: 3 + 1 + 1.2346 sin(day)).
    t = fc.times.as_unit("s").asi8
    expected = 4.0 + 1.234567891 * np.sin(2 * np.pi * (t % 86_400) / 86_400)
    assert np.allclose(fc.values, expected, atol=1e-3)


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        ([], "exactly one of --history"),
        (["--history", "a.csv", "--history-dir", "d"], "exactly one of --history"),
        (["--history", "{h}"], "--output is required"),
        (["--history", "{h}", "--output", "x.txt"], "must end in .csv or .json"),
        (["--history", "{h}", "--output", "x.json", "--season", "weekly"], "--season"),
        (["--history", "{h}", "--output", "x.json", "--quantiles", "0.9,0.1"], "--quantiles"),
        (["--history", "{h}", "--output", "x.json", "--exclude", "2026-11-27"], "--exclude"),
        (["--history", "{h}", "--output", "x.json", "--horizon", "7m"], "horizon"),
        (["--history", "missing.csv", "--output", "x.json"], "missing.csv"),
        (["--prometheus", "http://127.0.0.1:9"], "--query"),
    ],
)
def test_bad_input_exits_2_with_one_line(args, needle, history, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    argv = ["forecast", *[a.replace("{h}", str(history)) for a in args]]
    code, out, err = run(argv, capsys)
    assert code == 2, err
    assert out == "" and err.count("\n") == 1 and needle in err


def test_too_short_history_is_a_clear_error(tmp_path, capsys):
    p = tmp_path / "short.csv"
    times = pd.date_range("2026-11-30T00:00:00Z", periods=30, freq="5min")
    p.write_text("timestamp,value\n" + "".join(f"{t:%Y-%m-%dT%H:%M:%SZ},1.5\n" for t in times))
    code, _, err = run(
        ["forecast", "--history", str(p), "--season", "1d", "--method", "holt-winters",
         "--output", str(tmp_path / "o.json")],
        capsys,
    )  # fmt: skip
    assert code == 2, err
    assert "short.csv" in err and "at least 288" in err, err


def test_previous_forecast_is_cross_faded_in(history, tmp_path, capsys):
    # An old forecast at a constant 50 (far from the new one) covering the new start.
    times = pd.date_range("2026-11-29T12:00:00Z", periods=24 * 12, freq="5min")
    old = tmp_path / "old.csv"
    old.write_text("timestamp,value\n" + "".join(f"{t:%Y-%m-%dT%H:%M:%SZ},50\n" for t in times))
    plain, faded = tmp_path / "plain.json", tmp_path / "faded.json"
    base = ["forecast", "--history", str(history), "--method", "seasonal-naive",
            "--season", "1d", "--horizon", "3h"]  # fmt: skip
    assert run([*base, "--output", str(plain)], capsys)[0] == 0
    code, _, err = run([*base, "--output", str(faded), "--previous", str(old),
                        "--overlap", "30m"], capsys)  # fmt: skip
    assert code == 0, err
    new = parse_forecast(plain.read_text(), source="plain").values
    got = parse_forecast(faded.read_text(), source="faded").values
    # Starts at the old value, reaches the new one after 30 min (6 steps), and every
    # value in between lies between the two forecasts (never a step neither contains).
    assert got[0] == pytest.approx(50.0)
    assert np.allclose(got[6:], new[6:])
    lo, hi = np.minimum(new[:7], 50.0), np.maximum(new[:7], 50.0)
    assert np.all((got[:7] >= lo - 1e-9) & (got[:7] <= hi + 1e-9))
