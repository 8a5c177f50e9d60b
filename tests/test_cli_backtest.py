"""`floorcast backtest`: the JSON contract, the HPA manifest, the report, bad input."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from cli_run import run

from floorcast import scenario
from floorcast.errors import InputError
from floorcast.hpa_manifest import load_hpa_file

POLICY = "operator/floorcast/data/shop/storefront.yaml"
HPA = """\
apiVersion: autoscaling/v2
kind: HorizontalPodAutoscaler
metadata: {name: storefront, namespace: shop}
spec:
  scaleTargetRef: {apiVersion: apps/v1, kind: Deployment, name: storefront}
  minReplicas: 2
  maxReplicas: 25
  metrics:
    - type: Resource
      resource: {name: cpu, target: {type: Utilization, averageUtilization: 70}}
  behavior:
    scaleDown:
      stabilizationWindowSeconds: 120
"""


@pytest.fixture(scope="module")
def history(tmp_path_factory) -> Path:
    p = tmp_path_factory.mktemp("bt") / "storefront.csv"
    p.write_text(scenario.history_csv("storefront", step="5min"))
    return p


def test_json_has_the_contract_keys(history, tmp_path, capsys):
    hpa = tmp_path / "hpa.yaml"
    hpa.write_text(HPA)
    code, out, err = run(["backtest", "-f", POLICY, "--history", str(history), "--hpa", str(hpa),
                          "--forecast-method", "seasonal-naive", "--json"], capsys)  # fmt: skip
    assert code == 0, err
    doc = json.loads(out)
    for name in ("reactive", "floorcast", "static_peak"):
        for key in ("under_capacity_minutes", "over_target_minutes", "replica_hours",
                    "peak_utilization", "scale_events"):  # fmt: skip
            assert key in doc[name]
    assert doc["baseline"] == 2 and doc["target_utilization"] == 0.7
    assert doc["floorcast"]["forecast_error"]["forecasts"] == 7
    # The demo's peaks outrun the reactive HPA; floors must not be worse.
    fc, re_ = doc["floorcast"], doc["reactive"]
    assert fc["under_capacity_minutes"] <= re_["under_capacity_minutes"]


def test_sweep_table_and_self_contained_report(history, tmp_path, capsys):
    out_html = tmp_path / "r.html"
    code, out, err = run(["backtest", "-f", POLICY, "--history", str(history), "--baseline", "2",
                          "--target-utilization", "70", "--forecast-method", "seasonal-naive",
                          "--report", str(out_html),
                          "--sweep", "leadTime=5m,15m", "headroom=0,0.2"],
                         capsys)  # fmt: skip
    assert code == 0, err
    assert "trade-off" in out and "15m" in out
    page = out_html.read_text()
    assert "data:image/png;base64," in page
    assert "http://" not in page and "https://" not in page and "<script" not in page


def test_bad_history_exits_2_with_one_line(tmp_path, capsys):
    bad = tmp_path / "h.csv"
    bad.write_text("timestamp,value\n2026-01-01T00:00:00Z,1\n2026-01-01T00:05:00Z,nan\n")
    code, out, err = run(["backtest", "-f", POLICY, "--history", str(bad)], capsys)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and "h.csv" in err


def test_hpa_manifest_defaults_and_errors(tmp_path):
    p = tmp_path / "hpa.yaml"
    p.write_text(HPA)
    h = load_hpa_file(p)
    assert (h.min_replicas, h.max_replicas, h.target_utilization) == (2, 25, 0.7)
    # Unset fields keep [HPA doc] "Default behavior" values.
    assert h.scale_down.stabilization_window_seconds == 120
    assert h.scale_up.policies[1].value == 4 and h.scale_up.stabilization_window_seconds == 0
    p.write_text(HPA.replace("averageUtilization: 70", "averageUtilization: high"))
    with pytest.raises(
        InputError, match=r"hpa.yaml: spec.metrics\[0\].resource.target.averageUtilization"
    ):
        load_hpa_file(p)
    p.write_text(HPA.replace("stabilizationWindowSeconds: 120", "stabilizationWindowSeconds: 7200"))
    with pytest.raises(InputError, match="between 0 and 3600"):
        load_hpa_file(p)


def test_a_gap_across_a_forecast_origin_is_not_filled_from_the_future(
    history, tmp_path, capsys, monkeypatch
):
    """Two files equal up to the end of a 25-minute hole, different after it: what the
    replay is given must be identical before the hole ends, or a forecast made inside
    it has seen a sample recorded after its origin."""
    from floorcast.cli import backtest as cli_bt

    lines = history.read_text().splitlines()
    header, rows = lines[0], lines[1:]
    cut = len(rows) // 2
    gap = rows[:cut] + rows[cut + 4 :]  # 5-minute steps: 4 missing samples
    other = rows[:cut] + [f"{r.split(',')[0]},{float(r.split(',')[1]) * 3:g}"
                          for r in rows[cut + 4 :]]  # fmt: skip
    seen = []

    def capture(spec, hist, *args, **kwargs):  # the replay itself is tested elsewhere
        seen.append(hist)
        raise SystemExit(0)

    monkeypatch.setattr(cli_bt.replay, "run", capture)
    for i, body in enumerate((gap, other)):
        p = tmp_path / f"h{i}.csv"
        p.write_text("\n".join([header, *body]) + "\n")
        run(["backtest", "-f", POLICY, "--history", str(p), "--json"], capsys)
    a, b = seen
    t = lambda row: pd.Timestamp(row.split(",")[0])  # noqa: E731
    before = a.times < t(rows[cut + 4])
    hole = (a.times > t(rows[cut - 1])) & before
    assert hole.sum() == 4  # the hole was filled onto the grid...
    np.testing.assert_array_equal(a.values[before], b.values[before])  # ...from the past only
    assert (a.values[hole] == float(rows[cut - 1].split(",")[1])).all()
