"""`floorcast backtest`: the tuned-HPA comparison and the oracle in JSON, text and report."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_run import run

from floorcast import scenario

POLICY = "operator/floorcast/data/shop/storefront.yaml"
BASE = ["backtest", "-f", POLICY, "--forecast-method", "seasonal-naive", "--baseline", "2",
        "--target-utilization", "70"]  # fmt: skip


@pytest.fixture(scope="module")
def history(tmp_path_factory) -> Path:
    p = tmp_path_factory.mktemp("tuned") / "storefront.csv"
    p.write_text(scenario.history_csv("storefront", step="5min"))
    return p


def test_json_carries_the_ladder_the_equal_saturation_saving_and_the_oracle(history, capsys):
    sweep = ["--sweep", "holdTime=0,15m", "targetUtilization=70,85"]
    code, out, err = run([*BASE, "--history", str(history), "--json", *sweep], capsys)
    assert code == 0, err
    doc = json.loads(out)
    tuned, lad = doc["tuned_hpa"], doc["tuned_hpa"]["ladder"]
    # The ladder starts at the HPA's own target (the reactive row) and, with a row at
    # 85 % in the sweep, above it; it ends at 10 %.
    assert lad[0]["target_utilization"] == 0.85 and lad[-1]["target_utilization"] == 0.1
    at70 = next(x for x in lad if x["target_utilization"] == 0.7)
    for key in ("under_capacity_minutes", "replica_hours", "scale_events"):
        assert at70[key] == doc["reactive"][key]
    # Lower targets buy capacity with replica-hours.
    assert lad[-1]["replica_hours"] > at70["replica_hours"]
    assert tuned["found"] in ("interpolated", "top", "beyond_ladder")
    if tuned["found"] == "interpolated":
        assert tuned["under_capacity_minutes"] == doc["floorcast"]["under_capacity_minutes"]
    fc_rh = doc["floorcast"]["replica_hours"]
    assert doc["saving_at_equal_saturation"] == pytest.approx(1 - fc_rh / tuned["replica_hours"])
    orc = doc["oracle"]
    assert "perfect foresight" in orc["label"] and "reference only" in orc["label"]
    for key in ("under_capacity_minutes", "over_target_minutes", "replica_hours",
                "peak_utilization", "scale_events"):  # fmt: skip
        assert key in orc
    if orc["saving_at_equal_saturation"] and orc["saving_at_equal_saturation"] > 0:
        want = doc["saving_at_equal_saturation"] / orc["saving_at_equal_saturation"]
        assert doc["oracle_capture"] == pytest.approx(want)
    rows = doc["sweep"]
    assert {(r["holdTime"], r["target_utilization"]) for r in rows} == {
        ("0s", 0.7), ("0s", 0.85), ("15m", 0.7), ("15m", 0.85)}  # fmt: skip
    for r in rows:
        assert "saving_at_equal_saturation" in r and "equal_saturation_target" in r
    # holdTime 0 never costs more than 15 m of hold at the same target.
    by = {(r["holdTime"], r["target_utilization"]): r["replica_hours"] for r in rows}
    assert by[("0s", 0.7)] <= by[("15m", 0.7)]
    assert doc["plan_step_seconds"] == 60.0  # the operator's grid (docs/policy.md)


def test_text_and_report_show_the_comparison(history, tmp_path, capsys):
    page = tmp_path / "r.html"
    code, out, err = run([*BASE, "--history", str(history), "--report", str(page)], capsys)
    assert code == 0, err
    assert "oracle" in out and "equal saturation" in out
    html = page.read_text()
    assert "Against a lower HPA target" in html and "perfect foresight" in html
    assert html.count("data:image/png;base64,") == 2  # the frontier and the time plots


@pytest.mark.parametrize(
    ("args", "words"),
    [
        (["--ladder", "70,abc"], "--ladder: not a number"),
        (["--ladder", "0,50"], "--ladder: expected percentages"),
        (["--sweep", "targetUtilization=0"], "--sweep targetUtilization: values must be > 0"),
        (["--sweep", "targetUtilization=2000"], "<= 1000"),
        (["--sweep", "holdTime=soon"], "holdTime"),
        (["--sweep", "headroom=-1"], "--sweep headroom: values must be >= 0"),
        (["--sweep", "cooldown=1m"], "unknown setting 'cooldown'"),
        (["--plan-step", "7m"], "--plan-step 7m must divide the forecast step 5m"),
        (["--plan-step", "0s"], "--plan-step"),
    ],
)
def test_bad_new_inputs_exit_2_with_one_line(history, capsys, args, words):
    code, out, err = run([*BASE, "--history", str(history), *args], capsys)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and words in err
