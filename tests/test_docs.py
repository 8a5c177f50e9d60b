"""The reference docs say what the code does: every CRD field, reason and metric is
documented, the format examples parse, and the floor rule's worked example is what
`floorcast plan` computes."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml

from floorcast.controller import metrics, state
from floorcast.core.series_text import parse_forecast, parse_history

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"
CRD = ROOT / "crds" / "forecastscalingpolicies.floorcast.dev.yaml"
FLOORCAST = Path(sys.executable).parent / "floorcast"


def _fields(schema: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    """Dotted path → schema, arrays as ``name[]`` (the notation docs/policy.md uses)."""
    out: dict[str, Any] = {}
    for name, sub in (schema.get("properties") or {}).items():
        path = f"{prefix}{name}"
        out[path] = sub
        if sub.get("type") == "array":
            out.update(_fields(sub.get("items") or {}, f"{path}[]."))
        else:
            out.update(_fields(sub, f"{path}."))
    return out


def _spec_schema() -> dict[str, Any]:
    crd = yaml.safe_load(CRD.read_text())
    return crd["spec"]["versions"][0]["schema"]["openAPIV3Schema"]["properties"]["spec"]


def _policy_rows() -> dict[str, str]:
    rows = {}
    for line in (DOCS / "policy.md").read_text().splitlines():
        m = re.match(r"\| `([^`]+)` \|(.*)", line)
        if m:
            rows[m.group(1)] = m.group(2)
    return rows


def test_every_crd_spec_field_is_documented_with_its_default() -> None:
    fields, rows = _fields(_spec_schema()), _policy_rows()
    assert len(fields) >= 25  # the walk found the nested fields, not just the top level
    missing = sorted(set(fields) - set(rows))
    assert not missing, f"docs/policy.md lacks rows for {missing}"
    for path, sub in fields.items():
        if "default" in sub:
            default = sub["default"]
            shown = json.dumps(default) if isinstance(default, bool) else str(default)
            cells = rows[path].split("|")
            assert f"`{shown}`" in cells[1], f"{path}: default {shown} not in {cells[1]!r}"
    extra = sorted(p for p in rows if "." in p and p.split(".")[0] in {"status"})
    assert not extra or all(p.startswith("status.") for p in extra)


def test_every_condition_reason_has_a_troubleshooting_row() -> None:
    ops = (DOCS / "operations.md").read_text()
    table = ops.split("## Troubleshooting by condition reason", 1)[1]
    # The reason constants in controller/state.py: upper-case names, CamelCase values.
    reasons = [v for k, v in vars(state).items() if k.isupper() and isinstance(v, str)
               and re.fullmatch(r"(?:[A-Z][a-z]+){2,}", v)]  # fmt: skip
    assert "ForecastStale" in reasons and "CapacityUnknown" in reasons
    for reason in reasons:
        assert f"| `{reason}` |" in table, reason


def test_every_metric_is_documented() -> None:
    ops = (DOCS / "operations.md").read_text()
    names = [m._name for m in vars(metrics).values() if hasattr(m, "_name")]
    assert len(names) >= 5
    for name in names:
        # prometheus_client drops the _total suffix from a Counter's _name.
        assert re.search(rf"`{name}(_total)?[{{`]", ops), name


def test_operations_has_the_cautions_and_the_image_build_note() -> None:
    ops = " ".join((DOCS / "operations.md").read_text().split())
    assert "change production availability and cost" in ops
    assert "follow your organisation's change process" in ops
    # The image section names the test that builds it and the release workflow.
    assert "e2e/test_image.py" in ops and (ROOT / "e2e" / "test_image.py").exists()
    assert ".github/workflows/release.yml" in ops


def _blocks(lang: str) -> list[str]:
    return re.findall(rf"```{lang}\n(.*?)```", (DOCS / "formats.md").read_text(), re.S)


def test_format_examples_parse_with_the_real_readers() -> None:
    csvs, jsons = _blocks("csv"), _blocks("json")
    assert len(csvs) == 3 and len(jsons) == 2
    history = parse_history(csvs[0], source="history example", fmt="csv")
    assert len(history.values) == 4
    band = parse_forecast(csvs[1], source="forecast CSV example", fmt="csv")
    assert band.upper is not None and float(band.upper[0]) == 3.0
    doc = parse_forecast(jsons[0], source="forecast JSON example", fmt="json")
    assert doc.unit == "cores" and str(doc.generated) == "2027-01-08 12:00:00+00:00"
    # The Quantiles section's examples: levels as written, read back increasing.
    qcsv = parse_forecast(csvs[2], source="quantile CSV example", fmt="csv")
    assert qcsv.levels == (0.5, 0.9, 0.95, 0.99) and float(qcsv.quantiles[3, 1]) == 3.55
    qjson = parse_forecast(jsons[1], source="quantile JSON example", fmt="json")
    assert qjson.levels == (0.5, 0.95, 0.99) and qjson.upper is None


@pytest.mark.parametrize(
    ("text", "fmt", "says"),
    [  # each a rule docs/formats.md states
        ("timestamp,value\n2027-01-08T12:00:00,1\n2027-01-08T12:05:00,1\n", "csv", "offset"),
        ("timestamp,value\n2027-01-08T12:00:00Z,-1\n2027-01-08T12:05:00Z,1\n", "csv", "negative"),
        ('{"points": [{"t": "2027-01-08T12:00:00Z", "value": 1, "upperr": 2}]}', "json",
         "upperr"),
        ("timestamp,value,q95\n2027-01-08T12:00:00Z,1,1\n", "forecast csv", "outside"),
        ("timestamp,value,q0.5,q0.50\n2027-01-08T12:00:00Z,1,1,1\n", "forecast csv",
         "repeats"),
        ("timestamp,value,q0.5,q0.9\n2027-01-08T12:00:00Z,1,2,1\n", "forecast csv",
         "must not decrease"),
    ],
)  # fmt: skip
def test_format_rules_stated_in_the_docs_hold(text: str, fmt: str, says: str) -> None:
    from floorcast.errors import InputError

    with pytest.raises(InputError, match=says):
        parse_history(text, source="x", fmt=fmt) if fmt == "csv" else parse_forecast(
            text, source="x", fmt=fmt.split()[-1]
        )


def test_worked_example_matches_floorcast_plan(tmp_path: Path) -> None:
    points = []
    for i in range(48):
        h, m = divmod(i * 5, 60)
        t = f"2027-01-08T{12 + h:02d}:{m:02d}:00Z"
        points.append({"t": t, "value": 3.0 if t[11:16] in ("13:00", "13:05") else 0.8})
    fc = tmp_path / "f.json"
    fc.write_text(json.dumps({"unit": "cores", "step": "5m", "points": points,
                              "generated": "2027-01-08T12:00:00Z"}))  # fmt: skip
    pol = tmp_path / "p.yaml"
    pol.write_text(yaml.safe_dump({
        "apiVersion": "floorcast.dev/v1alpha1", "kind": "ForecastScalingPolicy",
        "metadata": {"name": "web"},
        "spec": {"targetRef": {"name": "web"},
                 "forecast": {"configMapRef": {"name": "f", "key": "f.json"}},
                 "capacity": {"perReplica": 0.5}, "leadTime": "10m", "holdTime": "30m",
                 "headroom": 0.1}}))  # fmt: skip
    res = subprocess.run(
        [str(FLOORCAST), "plan", "-f", str(pol), "--forecast", str(fc), "--json",
         "--at", "2027-01-08T12:40:00Z", "--baseline", "2", "--hpa-max", "10"],
        capture_output=True, text=True, check=True,
    )  # fmt: skip
    changes = [(c["at"], c["from"], c["to"]) for c in json.loads(res.stdout)["changes"]]
    # By hand (docs/policy.md, worked example): the load on the straight line between
    # the 5-minute samples (numpy.interp at each minute), need = ceil(load × 1.1 / 0.5),
    # each need raised 10 minutes ahead and held 30 minutes after.
    minutes = np.arange(12 * 60 + 40, 14 * 60 + 30)
    load = np.interp(minutes, [12 * 60 + 55, 13 * 60, 13 * 60 + 5, 13 * 60 + 10],
                     [0.8, 3.0, 3.0, 0.8])  # fmt: skip
    # Each minute stands for the interval up to the next: the larger of its two ends.
    top = np.maximum(load, np.append(load[1:], load[-1]))
    need = np.ceil(top * 1.1 / 0.5 - 1e-9).astype(int)
    floor = [max(2, need[max(0, i - 30): i + 11].max()) for i in range(len(minutes) - 10)]
    want = [(f"2027-01-08T{minutes[i] // 60:02d}:{minutes[i] % 60:02d}:00Z", floor[i - 1],
             floor[i]) for i in range(1, len(floor)) if floor[i] != floor[i - 1]]  # fmt: skip
    assert changes == want
    assert changes[4] == ("2027-01-08T12:49:00Z", 6, 7) and changes[-1][0].endswith("13:40:00Z")
    text = (DOCS / "policy.md").read_text()
    assert "**12:49** to 7" in text and "**13:40**" in text
