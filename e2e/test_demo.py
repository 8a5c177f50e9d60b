"""`floorcast demo` live, shortened, against its own real local control plane.

The demo starts a control plane of its own (like `make demo`), so this test needs no
fixture; it asserts on the samples the demo's live table showed.
"""

from __future__ import annotations

import io
import json

from rich.console import Console

from floorcast.cli.demo import BASELINE
from floorcast.cli.demo_live import run_live


def test_demo_raises_the_floor_and_the_deployment_follows(tmp_path):
    log = io.StringIO()
    result = run_live(tmp_path, Console(file=log, width=120), duration="60s", plots=False)
    out = log.getvalue()
    assert "torn down" in out, out
    by = {}
    for s in result.samples:
        by.setdefault(s["service"], []).append(s)
    assert set(by) == {"storefront", "search", "reports", "storefront-alone"}, out
    # Enforce: the floor rose above the owner's minReplicas, the HPA's minReplicas took
    # it, and the real HPA controller scaled the Deployment to it (the HPA clamps
    # replicas to [minReplicas, maxReplicas]; Kubernetes docs, "Horizontal Pod
    # Autoscaling", algorithm details — and e2e/test_controlplane's HPA test).
    for name in ("storefront", "search"):
        rows = by[name]
        assert all(r["baseline"] in (BASELINE, "–") for r in rows)
        top = max(r["floor"] for r in rows if isinstance(r["floor"], int))
        assert top > BASELINE, rows
        assert any(r["minReplicas"] == top and r["replicas"] >= top for r in rows), rows
        # The living cluster: the floor's Pods became Ready (kwok, after the start-up delay).
        assert any(isinstance(r["ready"], int) and r["ready"] >= top for r in rows), rows
    # DryRun: a proposal above the baseline, and the HPA's minReplicas left alone (its
    # own replicas follow the load the driver gives the Pods).
    rep = by["reports"]
    assert max(r["proposed"] for r in rep if isinstance(r["proposed"], int)) > BASELINE, rep
    assert all(r["minReplicas"] == BASELINE for r in rep), rep
    # storefront's twin has no policy: the HPA alone, on real metrics.
    twin = by["storefront-alone"]
    assert all(r["minReplicas"] == BASELINE and r["floor"] == "–" for r in twin), twin
    assert any(r["utilization"] != "–" for r in twin), twin
    assert result.index is not None and result.index.exists()
    for path in result.reports.values():
        assert "<html" in path.read_text().lower()
    assert json.loads((tmp_path / "live-samples.json").read_text()) == result.samples
