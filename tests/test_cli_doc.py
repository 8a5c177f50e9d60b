"""docs/cli.md says what the commands print: its key tables are compared with the real
``--json`` output of ``plan``, ``backtest`` and ``forecast --evaluate``, and its exit
codes with what bad input and a good run return."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest
import yaml
from cli_run import run

from floorcast import scenario

ROOT = Path(__file__).resolve().parents[1]
DOC = (ROOT / "docs" / "cli.md").read_text()
POLICY = "docs/examples/policy.yaml"
SCENARIOS = ("reactive", "static_peak", "floorcast")


def section(title: str) -> str:
    m = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## |\Z)", DOC, flags=re.M | re.S)
    assert m, f"docs/cli.md has no section '{title}'"
    return m.group(1)


def tables(text: str) -> list[list[tuple[set[str], str]]]:
    """Each Markdown table as rows of (the backticked keys of the first cell, the rest)."""
    out: list[list[tuple[set[str], str]]] = []
    rows: list[tuple[set[str], str]] = []
    for line in [*text.splitlines(), ""]:
        if line.startswith("|"):
            cells = [c.strip() for c in line.strip("|").split(" | ")]
            separator = re.fullmatch(r"\|[-| :]+\|", line.strip())
            if not separator and cells[0] not in ("Key", "Code", "Command"):
                rows.append((set(re.findall(r"`([^`]+)`", cells[0])) or {cells[0]},
                             " | ".join(cells[1:])))  # fmt: skip
        elif rows:
            out.append(rows)
            rows = []
    return out


def keys(rows: list[tuple[set[str], str]], prefix: str = "") -> set[str]:
    return {prefix + k for ks, _ in rows for k in ks}


def paths(doc: Any, documented: set[str], prefix: str = "") -> set[str]:
    """Key paths of a JSON document (``a.b``, lists as ``a[].b``), descending only where
    the docs describe the children, so ``next_change`` is one documented key."""
    out: set[str] = set()
    if isinstance(doc, dict):
        for k, v in doc.items():
            path = f"{prefix}{k}"
            out.add(path)
            child = v[0] if isinstance(v, list) and v else v
            sep = "[]." if isinstance(v, list) else "."
            if any(d.startswith(path + sep) for d in documented):
                out |= paths(child, documented, path + sep)
    return out


@pytest.fixture(scope="module")
def shop(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("clidoc")
    (d / "storefront.csv").write_text(scenario.history_csv("storefront", step="5min"))
    return d


def test_plan_json_keys_are_the_documented_ones(shop, capsys):
    fc = shop / "fc.json"
    code, _, err = run(["forecast", "--history", str(shop / "storefront.csv"), "--method",
                        "seasonal-naive", "--output", str(fc)], capsys)  # fmt: skip
    assert code == 0, err
    code, out, err = run(["plan", "-f", POLICY, "--forecast", str(fc), "--json",
                          "--at", "2026-11-30T10:00:00Z", "--baseline", "2"], capsys)  # fmt: skip
    assert code == 0, err
    doc = json.loads(out)
    assert doc["changes"] and doc["next_change"] == doc["changes"][0]
    (table,) = tables(section("`floorcast plan --json`"))
    documented = keys(table)
    assert paths(doc, documented) == documented


def test_backtest_json_has_every_documented_key(shop, capsys):
    # The example policy with the live correction and the accuracy guard on, so their
    # keys are present too.
    body = yaml.safe_load(Path(POLICY).read_text())
    body["spec"]["liveCorrection"] = {"enabled": True}
    body["spec"]["accuracyGuard"] = {"enabled": True}
    policy = shop / "live-policy.yaml"
    policy.write_text(yaml.safe_dump(body))
    code, out, err = run(["backtest", "-f", str(policy), "--history", str(shop / "storefront.csv"),
                          "--baseline", "2", "--forecast-method", "seasonal-naive", "--json",
                          "--sweep", "leadTime=5m", "headroom=0,0.1",
                          "accuracyGuard.maxError=0.3"], capsys)  # fmt: skip
    assert code == 0, err
    doc = json.loads(out)
    top, scores, error = tables(section("`floorcast backtest --json`"))
    documented = keys(top) | keys(error, "floorcast.forecast_error.")
    for name in SCENARIOS:
        documented |= keys(scores, f"{name}.")
    # Subset, not equality: the doc promises these keys and allows new ones.
    missing = documented - paths(doc, documented)
    assert not missing, f"docs/cli.md documents keys backtest --json lacks: {missing}"
    for row in doc["sweep"]:  # the sweep rows carry the scenario scores too
        assert keys(scores) | {"leadTime", "headroom"} <= set(row)
        assert row["maxError"] == 0.3 and set(row["accuracy_guard"]) == set(doc["accuracy_guard"])
    guard = doc["accuracy_guard"]
    assert 0 <= guard["tripped_share"] <= 1 and set(guard["without_guard"]) == keys(scores)
    live = doc["live_correction"]
    assert set(live) == {"active_share", "factor_p10", "factor_median", "factor_p90"}
    assert 0 < live["active_share"] <= 1 and live["factor_p10"] <= live["factor_p90"]


def test_forecast_evaluate_json_keys_are_the_documented_ones(shop, capsys):
    code, out, err = run(["forecast", "--history", str(shop / "storefront.csv"), "--evaluate",
                          "--json"], capsys)  # fmt: skip
    assert code == 0, err
    doc = json.loads(out)
    assert list(doc) == ["storefront"]  # the file name without its extension
    (table,) = tables(section("`floorcast forecast --evaluate --json`"))
    assert {k.removeprefix("<series>.") for k in keys(table)} == set(doc["storefront"])
    (scores_row,) = [meaning for ks, meaning in table if "<series>.scores" in ks]
    score_keys = set(re.findall(r"`([a-z]+)`", scores_row))
    assert doc["storefront"]["scores"]
    for method_scores in doc["storefront"]["scores"].values():
        assert set(method_scores) == score_keys


def test_exit_codes_are_the_documented_ones(shop, capsys):
    (table,) = tables(section("Exit codes"))
    assert keys(table) == {"0", "1", "2"}
    bad = shop / "bad.csv"
    bad.write_text("timestamp,value\n2026-11-20T03:10:00Z,1\n2026-11-20T03:15:00,1\n")
    code, out, err = run(["forecast", "--history", str(bad), "--evaluate"], capsys)
    assert (code, out) == (2, "")
    assert err.count("\n") == 1 and err.startswith("floorcast: error: ") and "row 3" in err
    code, _, _ = run(["plan", "--no-such-option"], capsys)
    assert code == 2  # a usage error is bad input too


def test_status_json_keys_and_columns_are_the_documented_ones():
    """From a status with every field the operator writes, through the pure row builder
    that ``floorcast status --json`` prints (the real command: e2e/test_cli_status.py)."""
    from datetime import UTC, datetime

    from floorcast.cli.status_rows import COLUMNS, policy_row

    status = {
        "floor": 7, "baseline": 2, "proposedFloor": 7, "leadTime": {"value": "2m"},
        "nextChange": {"at": "2026-12-03T18:20:00Z", "replicas": 2},
        "forecastGenerated": "2026-12-03T17:48:00Z", "lastAppliedTime": "2026-12-03T17:50:00Z",
        "accuracy": {"error": 0.1, "exceedance": 0.0, "reason": "WithinLimits", "message": "m"},
        "addedReplicaHours": 1.5, "explanation": "floor 7: the 18:05 peak",
        "conditions": [{"type": "Ready", "status": "True", "reason": "FloorApplied",
                        "message": "m"}],
    }  # fmt: skip
    obj = {"metadata": {"namespace": "shop", "name": "web"}, "status": status,
           "spec": {"targetRef": {"name": "web"}, "mode": "Enforce"}}  # fmt: skip
    doc = policy_row(obj, datetime(2026, 12, 3, 18, tzinfo=UTC))
    assert all(v is not None for v in doc.values())  # a full status fills every key
    (table,) = tables(section("`floorcast status --json`"))
    documented = keys(table)
    assert paths(doc, documented) == documented
    (columns,) = tables(section("`floorcast status`"))
    shown = [c for names, _ in columns if names != {"Column"} for n in names
             for c in n.split(", ")]  # fmt: skip
    assert shown == list(COLUMNS)
