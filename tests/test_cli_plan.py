"""`floorcast plan` and `floorcast demo`: output contract and every bad-input class."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_run import run
from rich.console import Console

from floorcast import scenario
from floorcast.cli.demo import run_offline

POLICY = """\
apiVersion: floorcast.dev/v1alpha1
kind: ForecastScalingPolicy
metadata: {name: web, namespace: shop}
spec:
  targetRef: {name: web}
  forecast: {configMapRef: {name: web-forecast, key: forecast.csv}}
  capacity: {perReplica: 1.0}
  leadTime: 10m
  holdTime: 10m
  headroom: 0
  maxReplicas: 8
"""


def write_forecast(path: Path, values, *, step="5min", start="2026-12-01T00:00:00Z") -> Path:
    times = pd.date_range(start, periods=len(values), freq=step)
    rows = [f"{t:%Y-%m-%dT%H:%M:%SZ},{v}" for t, v in zip(times, values, strict=True)]
    path.write_text("timestamp,value\n" + "\n".join(rows) + "\n")
    return path


@pytest.fixture
def files(tmp_path: Path) -> tuple[Path, Path]:
    policy = tmp_path / "policy.yaml"
    policy.write_text(POLICY)
    # Need 1 until 01:00, then 5 for 15 minutes, then 1 again.
    values = [1.0] * 12 + [5.0] * 3 + [1.0] * 21
    return policy, write_forecast(tmp_path / "fc.csv", values)


def test_plan_json_is_one_document_with_the_contract_keys(files, capsys):
    policy, fc = files
    code, out, err = run(
        [
            "plan",
            "-f",
            str(policy),
            "--forecast",
            str(fc),
            "--json",
            "--at",
            "2026-12-01T00:00:00Z",
            "--baseline",
            "2",
        ],
        capsys,
    )
    assert code == 0, err
    doc = json.loads(out)  # the whole stdout parses: nothing else is printed there
    assert doc["floor_now"] == 2
    # Planned on the forecast read each minute (docs/policy.md, "Planning resolution"):
    # straight lines between the samples, so the load climbs 1 → 5 from 00:55 to
    # 01:00 and falls back from 01:10 to 01:15; each minute stands for the interval
    # up to the next, so the minute from 00:56 needs ceil(2.6) = 3 (its end, 00:57),
    # 4 from 00:57, 5 from 00:58 to the minute from 01:10. Lead 10m puts each rise
    # ten minutes earlier; hold 10m keeps 5 until 01:21 and lets 4, 3, 2 follow.
    assert doc["next_change"]["at"] == "2026-12-01T00:46:00Z"
    assert (doc["next_change"]["from"], doc["next_change"]["to"]) == (2, 3)
    assert doc["next_change"]["cause_at"] == "2026-12-01T00:56:00Z"
    ref = np.interp(57, [55, 60], [1.0, 5.0])  # the interval's end, by numpy's interp
    assert doc["next_change"]["cause_load"] == pytest.approx(ref)
    assert [(c["at"], c["from"], c["to"]) for c in doc["changes"]] == [
        ("2026-12-01T00:46:00Z", 2, 3),
        ("2026-12-01T00:47:00Z", 3, 4),
        ("2026-12-01T00:48:00Z", 4, 5),
        ("2026-12-01T01:22:00Z", 5, 4),
        ("2026-12-01T01:23:00Z", 4, 3),
        ("2026-12-01T01:24:00Z", 3, 2),
    ]
    assert doc["plan_step_seconds"] == 60.0
    # Every change sits on a whole minute: a real instant of the planning grid.
    assert all(c["at"].endswith(":00Z") for c in doc["changes"])


def test_plan_flags_clamp_to_hpa_max(files, capsys):
    policy, fc = files
    code, out, _ = run(
        [
            "plan",
            "-f",
            str(policy),
            "--forecast",
            str(fc),
            "--json",
            "--hpa-max",
            "3",
            "--at",
            "2026-12-01T00:55:00Z",
        ],
        capsys,
    )
    assert code == 0
    doc = json.loads(out)
    assert doc["floor_now"] == 3 and doc["ceiling"] == 3


def test_plan_table_and_plot(files, tmp_path, capsys):
    policy, fc = files
    png = tmp_path / "plan.png"
    code, out, _ = run(
        [
            "plan",
            "-f",
            str(policy),
            "--forecast",
            str(fc),
            "--plot",
            str(png),
            "--at",
            "2026-12-01T00:00:00Z",
        ],
        capsys,
    )
    assert code == 0
    # Baseline 1: the minute from 00:55 reaches 1.8 (the straight line 00:55→01:00),
    # needs 2 and enters the 10-minute lead window at 00:45, the first change.
    assert "floor now 1" in out and "00:45:00Z" in out and "1 → 2" in out and "4 → 5" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000


BAD_FORECASTS = {
    "nan": ("timestamp,value\n2026-12-01T00:00:00Z,1\n2026-12-01T00:05:00Z,nan\n", "row 3"),
    "inf": ("timestamp,value\n2026-12-01T00:00:00Z,inf\n2026-12-01T00:05:00Z,1\n", "row 2"),
    "negative": ("timestamp,value\n2026-12-01T00:00:00Z,1\n2026-12-01T00:05:00Z,-2\n", "row 3"),
    "unsorted": (
        "timestamp,value\n2026-12-01T00:05:00Z,1\n2026-12-01T00:00:00Z,1\n2026-12-01T00:10:00Z,1\n",
        "row 3",
    ),
    "duplicate": (
        "timestamp,value\n2026-12-01T00:00:00Z,1\n2026-12-01T00:00:00Z,1\n2026-12-01T00:05:00Z,1\n",
        "row 3",
    ),
    "irregular": (
        "timestamp,value\n"
        + "".join(f"2026-12-01T00:{m:02d}:00Z,1\n" for m in (0, 5, 10, 15))
        + "2026-12-01T00:17:30Z,1\n"
        + "".join(f"2026-12-01T00:{m:02d}:00Z,1\n" for m in (20, 25, 30, 35, 40, 45)),
        "row 6",
    ),
    "empty": ("", "empty"),
    "header only": ("timestamp,value\n", "no data"),
    "wrong columns": ("time,load\n2026-12-01T00:00:00Z,1\n", "column"),
    "no offset": ("timestamp,value\n2026-12-01T00:00:00,1\n2026-12-01T00:05:00,1\n", "row 2"),
    "band violated": (
        "timestamp,value,lower,upper\n2026-12-01T00:00:00Z,1,0.5,2\n2026-12-01T00:05:00Z,3,0.5,2\n",
        "row 3",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_FORECASTS))
def test_bad_forecast_exits_2_with_one_line_naming_file_and_row(case, files, tmp_path, capsys):
    policy, _ = files
    text, expected = BAD_FORECASTS[case]
    bad = tmp_path / "bad.csv"
    bad.write_text(text)
    code, out, err = run(["plan", "-f", str(policy), "--forecast", str(bad), "--json"], capsys)
    assert code == 2
    assert out == ""  # --json consumers never see a partial document
    assert err.count("\n") == 1 and err.startswith("floorcast: error: ")
    assert "bad.csv" in err and expected in err.lower()


BAD_POLICIES = {
    "unknown field": ("  headroom: 0\n", "  headroom: 0\n  leadTme: 5m\n", "leadTme"),
    "zero lead": ("  leadTime: 10m\n", "  leadTime: 0s\n", "spec.leadTime"),
    "max < min": ("  maxReplicas: 8\n", "  maxReplicas: 2\n  minReplicas: 3\n", "maxReplicas"),
    "negative headroom": ("  headroom: 0\n", "  headroom: -0.1\n", "spec.headroom"),
    "event factor": (
        "  headroom: 0\n",
        "  headroom: 0\n  plannedEvents:\n  - {name: s, start: '2026-12-01T01:00:00Z',"
        " end: '2026-12-01T02:00:00Z', factor: 0}\n",
        "factor",
    ),
    "event order": (
        "  headroom: 0\n",
        "  headroom: 0\n  plannedEvents:\n  - {name: s, start: '2026-12-01T02:00:00Z',"
        " end: '2026-12-01T01:00:00Z', factor: 2}\n",
        "end",
    ),
    "both capacities": ("{perReplica: 1.0}", "{perReplica: 1.0, fromHPA: true}", "capacity"),
    "no capacity": ("{perReplica: 1.0}", "{}", "capacity"),
    "both sources": (
        "key: forecast.csv}}",
        "key: forecast.csv}, url: 'https://fc.example/x'}",
        "forecast",
    ),
    "no source": ("{configMapRef: {name: web-forecast, key: forecast.csv}}", "{}", "forecast"),
}


@pytest.mark.parametrize("case", sorted(BAD_POLICIES))
def test_bad_policy_exits_2_naming_the_field(case, files, tmp_path, capsys):
    _, fc = files
    old, new, field = BAD_POLICIES[case]
    assert old in POLICY
    bad = tmp_path / "bad-policy.yaml"
    bad.write_text(POLICY.replace(old, new))
    code, out, err = run(["plan", "-f", str(bad), "--forecast", str(fc), "--json"], capsys)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "bad-policy.yaml" in err and field in err


def test_forecast_too_short_for_the_lead_time(files, tmp_path, capsys):
    policy, _ = files
    fc = write_forecast(tmp_path / "short.csv", [1.0] * 4)  # ends 00:15; lead 10m
    code, out, err = run(
        [
            "plan",
            "-f",
            str(policy),
            "--forecast",
            str(fc),
            "--json",
            "--at",
            "2026-12-01T00:10:00Z",
        ],
        capsys,
    )
    assert code == 2 and out == ""
    assert "forecast ends at 2026-12-01T00:15:00Z, before now + lead time" in err


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--at", "tomorrow"], "--at"),
        (["--at", "2026-12-01T00:00:00"], "offset"),
        (["--baseline", "0"], "--baseline"),
        (["--per-replica", "-1"], "--per-replica"),
    ],
)
def test_bad_flags_exit_2(args, needle, files, capsys):
    policy, fc = files
    code, out, err = run(
        ["plan", "-f", str(policy), "--forecast", str(fc), "--json", *args], capsys
    )
    assert code == 2 and out == "" and needle in err and err.count("\n") == 1


def test_missing_files_exit_2(tmp_path, files, capsys):
    policy, fc = files
    code, _, err = run(["plan", "-f", str(tmp_path / "nope.yaml"), "--forecast", str(fc)], capsys)
    assert code == 2 and "nope.yaml" in err
    code, _, err = run(["plan", "-f", str(policy), "--forecast", str(tmp_path / "no.csv")], capsys)
    assert code == 2 and "no.csv" in err


def test_console_script_runs_in_a_subprocess(files):
    policy, fc = files
    exe = Path(sys.executable).parent / "floorcast"
    p = subprocess.run(
        [
            str(exe),
            "plan",
            "-f",
            str(policy),
            "--forecast",
            str(fc),
            "--json",
            "--at",
            "2026-12-01T00:00:00Z",
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert p.returncode == 0, p.stderr
    nxt = json.loads(p.stdout)["next_change"]
    assert (nxt["at"], nxt["from"], nxt["to"]) == ("2026-12-01T00:45:00Z", 1, 2)


def test_demo_offline_plans_every_service_ahead_of_its_peaks(tmp_path):
    with open(tmp_path / "log.txt", "w") as log:
        plans = run_offline(tmp_path, Console(file=log), plots=False)
    assert set(plans) == {s.name for s in scenario.SERVICES}
    for name, p in plans.items():
        assert (tmp_path / f"{name}-forecast.json").exists()
        floor = p.schedule.floor[0]
        req = p.schedule.required[0]
        lead = int(pd.Timedelta(p.spec.lead_time) / p.schedule.step)
        covered = int(p.schedule.covered[0])
        # The floor is in place a lead time before each need (up to the ceiling).
        for i in range(covered):
            assert floor[i] >= min(req[i : i + lead + 1].max(), p.bounds.ceiling)
        # and it comes down again: a floor is not a permanent peak minReplicas.
        assert floor[:covered].min() < floor[:covered].max()
    sf = plans["storefront"]
    # The storefront's evening peak (~20:00) is covered: floor raised before 19:50.
    t = sf.schedule.times
    at_1950 = int(np.flatnonzero(t == pd.Timestamp("2026-11-30T19:50:00Z"))[0])
    assert sf.schedule.floor[0, at_1950] >= 12


def test_lead_time_auto_plans_with_the_fallback_and_says_so(tmp_path, capsys):
    # With no cluster there are no Pods to measure: the fallback lead is the default 5m
    # (docs/policy.md, "Measured lead time"), and the human output says so.
    policy = tmp_path / "p.yaml"
    policy.write_text(POLICY.replace("leadTime: 10m", "leadTime: auto"))
    fc = write_forecast(tmp_path / "f.csv", [1.0] * 12 + [5.0] * 12)
    argv = ["plan", "-f", str(policy), "--forecast", str(fc), "--at", "2026-12-01T00:00:00Z",
            "--baseline", "1", "--hpa-max", "10"]  # fmt: skip
    code, out, _ = run(argv, capsys)
    assert code == 0 and "leadTime auto: planned with the fallback lead 5m" in out
    code, out, _ = run([*argv, "--json"], capsys)
    first = json.loads(out)["changes"][0]
    # The ramp to 5.0 starts after 00:55 (the minute from 00:55 reaches 1.8: needs 2),
    # raised 5 minutes ahead, not the 10 the policy's old fixed lead gave.
    assert (first["at"], first["cause_at"], first["to"]) == (
        "2026-12-01T00:50:00Z", "2026-12-01T00:55:00Z", 2), first
