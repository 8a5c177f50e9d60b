"""``floorcast status``: the pure row builder, the kubectl-style ages, the table, and the
command's errors against a tiny fake API server (the real one: e2e/test_cli_status.py)."""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from typing import Any

import pytest
from cli_run import run

from floorcast.cli.status_rows import (
    COLUMNS,
    EXPLANATION_WIDTH,
    cells,
    human_age,
    policy_row,
    rows,
    table,
)

NOW = datetime(2026, 12, 3, 18, 0, tzinfo=UTC)
S, M, H, MS = (timedelta(seconds=1), timedelta(minutes=1), timedelta(hours=1),
               timedelta(milliseconds=1))  # fmt: skip
D, Y = 24 * H, 365 * 24 * H

# k8s.io/apimachinery/pkg/util/duration/duration_test.go (TestHumanDuration and
# TestHumanDurationBoundaries, kubernetes/kubernetes master): the function kubectl's
# AGE column uses; every case of both tables, as (duration, want).
APIMACHINERY_CASES = [
    (S, "1s"), (70 * S, "70s"), (190 * S, "3m10s"), (70 * M, "70m"), (47 * H, "47h"),
    (49 * H, "2d1h"), ((8 * 24 + 2) * H, "8d"), (367 * D, "367d"), (2 * Y + 25 * H, "2y1d"),
    (8 * Y + 2 * H, "8y"),
    (-2 * S, "<invalid>"), (-2 * S + timedelta(microseconds=1), "0s"), (timedelta(0), "0s"),
    (S - MS, "0s"), (2 * M - MS, "119s"), (2 * M, "2m"), (2 * M + S, "2m1s"),
    (10 * M - MS, "9m59s"), (10 * M, "10m"), (10 * M + S, "10m"), (3 * H - MS, "179m"),
    (3 * H, "3h"), (3 * H + M, "3h1m"), (8 * H - MS, "7h59m"), (8 * H, "8h"),
    (8 * H + 59 * M, "8h"), (2 * D - MS, "47h"), (2 * D, "2d"), (2 * D + H, "2d1h"),
    (8 * D - MS, "7d23h"), (8 * D, "8d"), (8 * D + 23 * H, "8d"), (2 * Y - MS, "729d"),
    (2 * Y, "2y"), (2 * Y + 23 * H, "2y"), (2 * Y + 23 * H + 59 * M, "2y"),
    (2 * Y + D - MS, "2y"), (2 * Y + D, "2y1d"), (3 * Y, "3y"), (7 * Y, "7y"),
    (8 * Y - MS, "7y364d"), (8 * Y, "8y"), (8 * Y + 364 * D, "8y"), (9 * Y, "9y"),
]  # fmt: skip


@pytest.mark.parametrize(("d", "want"), APIMACHINERY_CASES)
def test_age_reads_like_kubectl(d: timedelta, want: str) -> None:
    assert human_age(d) == want


def full_policy(**status: Any) -> dict[str, Any]:
    """A policy as the operator leaves it in Enforce, with every status field set."""
    base: dict[str, Any] = {
        "floor": 7, "baseline": 2, "proposedFloor": None,
        "nextChange": {"at": "2026-12-03T18:20:00Z", "replicas": 2},
        "forecastGenerated": "2026-12-03T17:48:00Z",
        "lastAppliedTime": "2026-12-03T17:50:00Z",
        "accuracy": {"error": 0.15, "exceedance": 0.05, "reason": "WithinLimits",
                     "message": "WAPE 0.15 <= 0.5"},
        "addedReplicaHours": 3.4,
        "explanation": "floor 7: forecast 6.5 cores at 18:05 needs ceil(6.5/1) = 7",
        "leadTime": "2m30s",
        "conditions": [
            {"type": "Ready", "status": "True", "reason": "FloorApplied", "message": "floor 7"},
            {"type": "ForecastAccurate", "status": "True", "reason": "WithinLimits",
             "message": "m"},
        ],
    }  # fmt: skip
    base.update(status)
    return {"metadata": {"namespace": "shop", "name": "web"},
            "spec": {"targetRef": {"name": "web"}, "mode": "Enforce"},
            "status": {k: v for k, v in base.items() if v is not None}}  # fmt: skip


def test_row_carries_every_status_field() -> None:
    r = policy_row(full_policy(), NOW)
    assert r["namespace"] == "shop" and r["name"] == "web" and r["target"] == "web"
    assert (r["mode"], r["ready"], r["ready_reason"]) == ("Enforce", "True", "FloorApplied")
    assert (r["floor"], r["baseline"], r["proposed_floor"]) == (7, 2, None)
    assert r["next_change"] == {"at": "2026-12-03T18:20:00Z", "replicas": 2}
    assert r["forecast_age_seconds"] == 12 * 60  # 18:00 - 17:48
    assert r["accuracy"] == {"status": "True", "reason": "WithinLimits", "error": 0.15,
                             "exceedance": 0.05, "message": "WAPE 0.15 <= 0.5"}  # fmt: skip
    assert r["added_replica_hours"] == 3.4 and r["lead_time"] == "2m30s"
    assert r["explanation"].startswith("floor 7: forecast 6.5")
    assert r["last_applied_time"] == "2026-12-03T17:50:00Z"
    assert json.loads(json.dumps(r)) == r  # plain JSON, nothing pandas-typed


def test_table_cells_for_an_enforced_policy() -> None:
    c = dict(zip(COLUMNS, cells(policy_row(full_policy(), NOW)), strict=True))
    assert c["READY"] == "True FloorApplied" and c["FLOOR"] == "7" and c["BASELINE"] == "2"
    assert c["NEXT CHANGE"] == "2 @ 2026-12-03T18:20:00Z"
    assert c["FORECAST AGE"] == "12m" and c["LEAD TIME"] == "2m30s"
    assert c["ACCURACY"] == "ok (WAPE 0.15)" and c["ADDED"] == "3.4"


def test_a_policy_never_reconciled_is_all_dashes() -> None:
    """No status at all (operator not running yet, or an older one): a row, not an error."""
    obj = {"metadata": {"namespace": "a", "name": "p"}, "spec": {"mode": "DryRun"}}
    r = policy_row(obj, NOW)
    assert all(r[k] is None for k in r if k not in ("namespace", "name", "mode"))
    assert cells(r)[:3] == ["a", "p", "DryRun"]
    assert set(cells(r)[3:]) == {"-"}


def test_wrong_types_in_status_become_none_not_a_crash() -> None:
    obj = full_policy(floor="7", baseline=True, addedReplicaHours="x", forecastGenerated="noon",
                      nextChange={"at": 5}, conditions="Ready", accuracy=[1])  # fmt: skip
    r = policy_row(obj, NOW)
    assert r["floor"] is None and r["baseline"] is None and r["added_replica_hours"] is None
    assert r["forecast_generated"] == "noon" and r["forecast_age_seconds"] is None
    assert r["next_change"] == {"at": None, "replicas": None} and r["ready"] is None
    assert r["accuracy"] is None
    assert cells(r)[COLUMNS.index("NEXT CHANGE")] == "- @ -"


def test_dry_run_shows_the_proposed_floor_and_an_inaccurate_forecast() -> None:
    obj = full_policy(floor=None, proposedFloor=5, accuracy={"error": 0.65, "exceedance": 0.6,
                      "reason": "ForecastInaccurate"}, conditions=[{"type": "ForecastAccurate",
                      "status": "False", "reason": "ForecastInaccurate"}])  # fmt: skip
    c = dict(zip(COLUMNS, cells(policy_row(obj, NOW)), strict=True))
    assert c["FLOOR"] == "5 proposed" and c["ACCURACY"] == "inaccurate (WAPE 0.65)"
    assert c["READY"] == "-"  # no Ready condition


def test_explanation_is_cut_in_the_table_and_whole_in_json() -> None:
    long = "floor 9 because " + "x" * 200
    r = policy_row(full_policy(explanation=long), NOW)
    cell = cells(r)[COLUMNS.index("EXPLANATION")]
    assert len(cell) == EXPLANATION_WIDTH and cell.endswith("...")
    assert r["explanation"] == long


def test_future_forecast_and_numeric_lead_time() -> None:
    r = policy_row(full_policy(forecastGenerated="2026-12-03T18:05:00+00:00", leadTime=150), NOW)
    assert r["forecast_age_seconds"] == -300
    c = dict(zip(COLUMNS, cells(r), strict=True))
    assert c["FORECAST AGE"] == "<invalid>" and c["LEAD TIME"] == "2m30s"


def test_lead_time_from_the_measured_record() -> None:
    measured = {"value": "1m15s", "source": "Measured", "samples": 4, "podStartup": "45s"}
    r = policy_row(full_policy(leadTime=measured), NOW)
    assert r["lead_time"] == measured  # --json passes the record through whole
    assert cells(r)[COLUMNS.index("LEAD TIME")] == "1m15s"
    fallback = {"value": "5m", "source": "Default", "samples": 1}
    assert cells(policy_row(full_policy(leadTime=fallback), NOW))[
        COLUMNS.index("LEAD TIME")] == "5m (Default)"


def test_table_is_aligned_columns_sorted_by_namespace_then_name() -> None:
    objs = [full_policy(), {"metadata": {"namespace": "a", "name": "z"}},
            {"metadata": {"namespace": "a", "name": "b"}}]  # fmt: skip
    text = table(rows(objs, NOW))
    lines = text.splitlines()
    assert lines[0].split()[:3] == ["NAMESPACE", "NAME", "MODE"]
    assert [ln.split()[:2] for ln in lines[1:]] == [["a", "b"], ["a", "z"], ["shop", "web"]]
    start = lines[0].index("FLOOR")  # every row's FLOOR cell starts under its header
    assert lines[3][start:].startswith("7 ") and lines[1][start:].startswith("- ")
    assert all(ln == ln.rstrip() for ln in lines)


# --- the command against a fake API server --------------------------------------------


class FakeApi(BaseHTTPRequestHandler):
    """Answers with ``server.replies`` in turn (status, body), the last one from then
    on, and records every request's method and path."""

    def _any(self) -> None:
        srv: Any = self.server
        srv.seen.append((self.command, self.path))
        code, body = srv.replies.pop(0) if len(srv.replies) > 1 else srv.replies[0]
        data = body.encode() if isinstance(body, str) else json.dumps(body).encode()
        self.send_response(code)
        self.send_header("Content-Type", "application/json")
        self.send_header("Content-Length", str(len(data)))
        self.end_headers()
        self.wfile.write(data)

    do_GET = do_POST = do_PUT = do_PATCH = do_DELETE = _any

    def log_message(self, *args: Any) -> None:
        pass


@pytest.fixture
def fake(tmp_path: Path) -> Iterator[tuple[ThreadingHTTPServer, Path]]:
    srv = ThreadingHTTPServer(("127.0.0.1", 0), FakeApi)
    srv.seen, srv.replies = [], [(200, {"items": [], "metadata": {}})]  # type: ignore[attr-defined]
    threading.Thread(target=srv.serve_forever, daemon=True).start()
    kc = tmp_path / "kubeconfig"
    kc.write_text(json.dumps({
        "apiVersion": "v1", "kind": "Config", "current-context": "fake",
        "clusters": [{"name": "c", "cluster": {"server": f"http://127.0.0.1:{srv.server_port}"}}],
        "users": [{"name": "u", "user": {"token": "t"}}],
        "contexts": [{"name": "fake", "context": {"cluster": "c", "user": "u",
                                                  "namespace": "shop"}}],
    }))  # fmt: skip
    yield srv, kc
    srv.shutdown()
    srv.server_close()


def status_doc(code: int, reason: str, message: str, **details: Any) -> dict[str, Any]:
    return {"kind": "Status", "apiVersion": "v1", "status": "Failure", "code": code,
            "reason": reason, "message": message, "details": details}  # fmt: skip


def test_lists_the_contexts_namespace_with_get_only(fake, capsys) -> None:
    srv, kc = fake
    srv.replies = [(200, {"items": [full_policy()], "metadata": {}})]
    code, out, err = run(["status", "--kubeconfig", str(kc), "--json"], capsys)
    assert code == 0, err
    assert [r["name"] for r in json.loads(out)] == ["web"]
    ((method, path),) = srv.seen
    assert method == "GET"
    assert path.startswith("/apis/floorcast.dev/v1alpha1/namespaces/shop/forecastscalingpolicies")


def test_pages_are_followed_and_all_namespaces_lists_cluster_wide(fake, capsys) -> None:
    srv, kc = fake
    other = full_policy()
    other["metadata"] = {"namespace": "a", "name": "api"}
    srv.replies = [(200, {"items": [full_policy()], "metadata": {"continue": "tok"}}),
                   (200, {"items": [other], "metadata": {}})]  # fmt: skip
    code, out, err = run(["status", "--kubeconfig", str(kc), "-A"], capsys)
    assert code == 0, err
    seen = srv.seen
    assert [m for m, _ in seen] == ["GET", "GET"]
    assert seen[0][1].startswith("/apis/floorcast.dev/v1alpha1/forecastscalingpolicies?")
    assert "continue=tok" in seen[1][1] and "continue" not in seen[0][1]
    lines = out.splitlines()
    assert lines[0].startswith("NAMESPACE") and [ln.split()[:2] for ln in lines[1:]] == [
        ["a", "api"], ["shop", "web"]]


@pytest.mark.parametrize(("reply", "said"), [
    ((404, "404 page not found"), "CRD (forecastscalingpolicies.floorcast.dev) is not installed"),
    ((403, status_doc(403, "Forbidden", 'forecastscalingpolicies.floorcast.dev is forbidden: '
                      'User "bob" cannot list resource')), 'forbidden by http://127.0.0.1'),
    ((401, status_doc(401, "Unauthorized", "Unauthorized")), "refused the kubeconfig's"),
])  # fmt: skip
def test_api_refusals_are_one_line_exit_2(fake, capsys, reply, said) -> None:
    srv, kc = fake
    srv.replies = [reply]
    code, out, err = run(["status", "--kubeconfig", str(kc)], capsys)
    assert (code, out) == (2, "")
    assert err.count("\n") == 1 and err.startswith("floorcast: error: ") and said in err
    if reply[0] == 403:
        assert 'User "bob" cannot list' in err and "needs get and list" in err


def test_a_named_policy_that_does_not_exist(fake, capsys) -> None:
    srv, kc = fake
    srv.replies = [(404, status_doc(404, "NotFound", "not found", name="nope",
                                    group="floorcast.dev", kind="forecastscalingpolicies"))]
    code, out, err = run(["status", "--kubeconfig", str(kc), "nope"], capsys)
    assert (code, out) == (2, "") and "no ForecastScalingPolicy 'nope' in namespace shop" in err
    assert srv.seen[0][1].endswith("/namespaces/shop/forecastscalingpolicies/nope")


def test_no_policies_is_exit_0_with_a_note_on_stderr(fake, capsys) -> None:
    _, kc = fake
    code, out, err = run(["status", "--kubeconfig", str(kc), "-n", "other"], capsys)
    assert (code, out) == (0, "") and "no ForecastScalingPolicies in namespace other" in err
    code, out, _ = run(["status", "--kubeconfig", str(kc), "--json"], capsys)
    assert (code, json.loads(out)) == (0, [])


@pytest.mark.parametrize(("text", "said"), [
    (None, "no such file"),
    ("clusters: [", "not a usable kubeconfig"),
    ("{}", "not a usable kubeconfig"),
])  # fmt: skip
def test_kubeconfig_problems_are_exit_2(tmp_path, capsys, text, said) -> None:
    kc = tmp_path / "kc"
    if text is not None:
        kc.write_text(text)
    code, out, err = run(["status", "--kubeconfig", str(kc)], capsys)
    assert (code, out) == (2, "") and err.count("\n") == 1 and said in err and str(kc) in err


def test_unknown_context_and_unreachable_server_are_exit_2(fake, capsys) -> None:
    srv, kc = fake
    code, _, err = run(["status", "--kubeconfig", str(kc), "--context", "prod"], capsys)
    assert code == 2 and "no context 'prod' (contexts: fake)" in err
    port = srv.server_port
    srv.shutdown()
    srv.server_close()  # nothing listens on the port now
    code, out, err = run(["status", "--kubeconfig", str(kc)], capsys)
    assert (code, out) == (2, "")
    assert f"cannot reach the API server at http://127.0.0.1:{port}" in err


def test_namespace_and_all_namespaces_exclude_each_other(fake, capsys) -> None:
    _, kc = fake
    code, _, err = run(["status", "--kubeconfig", str(kc), "-n", "a", "-A"], capsys)
    assert code == 2 and "exclude each other" in err
