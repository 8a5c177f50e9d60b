"""``floorcast plan`` with ``serviceLevel`` (docs/policy.md, "serviceLevel")."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
from cli_run import run
from test_cli_plan import POLICY

LEVELS = (0.5, 0.9, 0.95, 0.99)


def _forecast(path: Path, *, quantiles: bool) -> Path:
    # Flat 2.0 for an hour; quantiles 2, 4, 5, 7 at every point, band 1..5.
    rows = []
    for i in range(12):
        t = f"2026-12-01T00:{i * 5:02d}:00Z"
        rows.append(f"{t},2.0,1.0,5.0" + (",2.0,4.0,5.0,7.0" if quantiles else ""))
    head = "timestamp,value,lower,upper" + (",q0.5,q0.9,q0.95,q0.99" if quantiles else "")
    path.write_text(head + "\n" + "\n".join(rows) + "\n")
    return path


def _plan(tmp_path: Path, capsys, level: float | None, *, quantiles: bool, human=False):
    pol = tmp_path / "p.yaml"
    pol.write_text(POLICY + (f"  serviceLevel: {level}\n" if level is not None else ""))
    fc = _forecast(tmp_path / "fc.csv", quantiles=quantiles)
    args = ["plan", "-f", str(pol), "--forecast", str(fc), "--at", "2026-12-01T00:00:00Z",
            "--baseline", "1"] + ([] if human else ["--json"])  # fmt: skip
    code, out, err = run(args, capsys)
    assert code == 0, err
    return out if human else json.loads(out)


def test_service_level_sizes_the_floor_on_the_interpolated_quantile(tmp_path, capsys):
    # 0.97 lies half-way between q0.95 = 5 and q0.99 = 7 (numpy.interp, the reference
    # for linear interpolation between levels): 6 per replica of 1.0, headroom 0 → 6.
    ref = float(np.interp(0.97, LEVELS, [2.0, 4.0, 5.0, 7.0]))
    doc = _plan(tmp_path, capsys, 0.97, quantiles=True)
    assert doc["sized_on"] == "q0.97"
    assert doc["floor_now"] == math.ceil(ref) == 6


def test_unset_keeps_the_upper_band_and_clamping_says_so(tmp_path, capsys):
    doc = _plan(tmp_path, capsys, None, quantiles=True)
    assert doc["sized_on"] == "upper band" and doc["floor_now"] == 5
    doc = _plan(tmp_path, capsys, 0.999, quantiles=True)
    assert doc["sized_on"].startswith("q0.99 (serviceLevel 0.999 is outside")
    assert doc["floor_now"] == 7
    doc = _plan(tmp_path, capsys, 0.5, quantiles=True)
    assert doc["sized_on"] == "q0.5" and doc["floor_now"] == 2


def test_without_quantiles_falls_back_to_the_band_and_says_which(tmp_path, capsys):
    doc = _plan(tmp_path, capsys, 0.95, quantiles=False)
    assert doc["sized_on"] == "upper band (serviceLevel 0.95: the forecast has no quantiles)"
    assert doc["floor_now"] == 5
    out = _plan(tmp_path, capsys, 0.95, quantiles=False, human=True)
    assert "sized on upper band (serviceLevel 0.95: the forecast has no quantiles)" in out


def test_service_level_out_of_bounds_is_exit_2(tmp_path, capsys):
    pol = tmp_path / "p.yaml"
    pol.write_text(POLICY + "  serviceLevel: 1.0\n")
    fc = _forecast(tmp_path / "fc.csv", quantiles=True)
    code, _, err = run(["plan", "-f", str(pol), "--forecast", str(fc), "--json",
                        "--at", "2026-12-01T00:00:00Z", "--baseline", "1"], capsys)  # fmt: skip
    assert code == 2
    assert "spec.serviceLevel" in err and "<= 0.999" in err
