"""Issue #14, item 8: every bad number on the command line is exit 2 with one line on
stderr, and output sizes are checked before anything is allocated."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_run import run
from test_cli_plan import POLICY, write_forecast

BIG = "9" * 400


@pytest.fixture
def files(tmp_path: Path) -> dict[str, Path]:
    policy = tmp_path / "policy.yaml"
    policy.write_text(POLICY)
    fc = write_forecast(tmp_path / "fc.csv", [1.0] * 12 + [5.0] * 3 + [1.0] * 21)
    t = pd.date_range("2026-11-16T00:00:00Z", periods=7 * 288, freq="5min")
    load = 5 + 3 * np.sin(np.arange(len(t)) / 288 * 2 * np.pi)
    hist = tmp_path / "h.csv"
    hist.write_text("timestamp,value\n" + "".join(
        f"{a:%Y-%m-%dT%H:%M:%SZ},{b:.3f}\n" for a, b in zip(t, load, strict=True)))  # fmt: skip
    return {"policy": policy, "forecast": fc, "history": hist, "out": tmp_path / "o.json"}


def _argv(files: dict[str, Path], template: list[str]) -> list[str]:
    return [str(files[a[1:-1]]) if a.startswith("{") else a for a in template]


PLAN = ["plan", "-f", "{policy}", "--forecast", "{forecast}"]
FORECAST = ["forecast", "--history", "{history}", "--output", "{out}"]
BACKTEST = ["backtest", "-f", "{policy}", "--history", "{history}"]

CASES = [
    ([*PLAN, "--baseline", BIG], "--baseline"),
    ([*PLAN, "--hpa-max", BIG], "--hpa-max"),
    ([*PLAN, "--hpa-max", str(2 ** 31)], "--hpa-max"),
    ([*PLAN, "--per-replica", BIG], "--per-replica"),
    ([*PLAN, "--per-replica", "nan"], "--per-replica"),
    ([*PLAN, "--per-replica", "inf"], "--per-replica"),
    ([*FORECAST, "--horizon", "99999999h"], "--horizon"),
    ([*FORECAST, "--horizon", "2000000h"], "--horizon"),  # used to allocate gigabytes
    ([*FORECAST, "--horizon", "365d"], "--horizon"),      # 105 120 points at 5 m
    ([*FORECAST, "--season", "99999999999h"], "--season"),
    ([*FORECAST, "--max-gap", "99999999999h"], "--max-gap"),
    ([*FORECAST, "--quantiles", f"0.1,{BIG}"], "--quantiles"),
    ([*BACKTEST, "--baseline", BIG], "--baseline"),
    ([*BACKTEST, "--hpa-max", BIG], "--hpa-max"),
    ([*BACKTEST, "--per-replica", BIG], "--per-replica"),  # was exit 1 (PlanningError)
    ([*BACKTEST, "--cadence", "1ms"], "--cadence"),        # was a near-endless replay
    ([*BACKTEST, "--cadence", "99999999999999h"], "--cadence"),
    (["run", "--metrics-port", "70000"], "--metrics-port"),
    (["run", "--liveness-port", BIG], "--liveness-port"),
    (["run", "--max-api-connections", BIG], "--max-api-connections"),
    (["run", "--interval", "99999999999h"], "--interval"),
]  # fmt: skip


@pytest.mark.parametrize(("template", "option"), CASES,
                         ids=[" ".join(c[0][-2:])[:40] for c in CASES])  # fmt: skip
def test_bad_numbers_exit_2_with_one_short_line(template, option, files, capsys):
    code, out, err = run(_argv(files, template), capsys)
    assert code == 2, err
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("floorcast: error: ")
    assert option in lines[0] and "internal error" not in lines[0]
    assert len(lines[0]) < 300  # a 400-digit value is not echoed in full


def test_a_bad_policy_number_exits_2(files, tmp_path, capsys):
    bad = tmp_path / "bad.yaml"
    bad.write_text(POLICY.replace("headroom: 0", f"headroom: {BIG}"))
    code, _, err = run(["plan", "-f", str(bad), "--forecast", str(files["forecast"])], capsys)
    assert code == 2 and "spec.headroom" in err and len(err) < 300


def test_bounds_still_accept_good_values(files, capsys):
    good = [*PLAN, "--baseline", "2", "--hpa-max", "8", "--per-replica", "1", "--json"]
    code, out, err = run(_argv(files, good), capsys)
    assert code == 0, err
    assert '"floor_now"' in out
