"""``floorcast status``'s rows: a policy object as the operator left it → one row.

Pure functions of the object and one ``now`` taken by the caller, so the table and
the ``--json`` document are tested without a cluster and every row of one run is
aged against the same instant. The keys are the contract in docs/cli.md
("`floorcast status --json`"); a status field the operator has not written (an older
operator, a policy not reconciled yet) becomes ``None`` / "-", never an error: a
read-only view must show whatever is there.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from datetime import datetime, timedelta
from typing import Any

from floorcast.durations import format_duration
from floorcast.errors import InputError
from floorcast.timefmt import parse_rfc3339

#: The table's columns, in order (docs/cli.md, "`floorcast status`").
COLUMNS = ("NAMESPACE", "NAME", "MODE", "READY", "FLOOR", "BASELINE", "NEXT CHANGE",
           "LEAD TIME", "FORECAST AGE", "ACCURACY", "ADDED", "EXPLANATION")  # fmt: skip
#: The explanation is cut to this many characters in the table; --json has it whole.
EXPLANATION_WIDTH = 60
NONE = "-"
_US = 1_000_000
_ACCURACY_WORDS = {"True": "ok", "False": "inaccurate", "Unknown": "not judged"}


def human_age(d: timedelta) -> str:
    """An age as kubectl's AGE column prints it (``45s``, ``3m10s``, ``12m``, ``3h``,
    ``2d1h``), so the column reads like ``kubectl get``'s.

    The rules are those of k8s.io/apimachinery/pkg/util/duration.HumanDuration (what
    kubectl's printers use): up to 2 s in the future counts as now (clock skew), more
    is ``<invalid>``; ~2-3 significant figures above that. tests/test_cli_status.py
    checks it against that function's own test table (duration_test.go).
    """
    us = d // timedelta(microseconds=1)
    seconds = -((-us) // _US) if us < 0 else us // _US  # Go's int(): toward zero
    if seconds < -1:
        return "<invalid>"
    if seconds < 0:
        return "0s"
    if seconds < 120:
        return f"{seconds}s"
    minutes = seconds // 60
    if minutes < 10:
        s = seconds % 60
        return f"{minutes}m{s}s" if s else f"{minutes}m"
    if minutes < 180:
        return f"{minutes}m"
    hours = minutes // 60
    if hours < 8:
        m = minutes % 60
        return f"{hours}h{m}m" if m else f"{hours}h"
    if hours < 48:
        return f"{hours}h"
    days = hours // 24
    if hours < 24 * 8:
        h = hours % 24
        return f"{days}d{h}h" if h else f"{days}d"
    if hours < 24 * 365 * 2:
        return f"{days}d"
    years, dy = days // 365, days % 365
    if hours < 24 * 365 * 8:
        return f"{years}y{dy}d" if dy else f"{years}y"
    return f"{years}y"


def _map(x: Any) -> Mapping[str, Any]:
    return x if isinstance(x, Mapping) else {}


def _int(x: Any) -> int | None:
    return x if isinstance(x, int) and not isinstance(x, bool) else None


def _num(x: Any) -> float | None:
    return float(x) if isinstance(x, int | float) and not isinstance(x, bool) else None


def _str(x: Any) -> str | None:
    return x if isinstance(x, str) and x else None


def _condition(status: Mapping[str, Any], type_: str) -> Mapping[str, Any]:
    for c in status.get("conditions") or []:
        if isinstance(c, Mapping) and c.get("type") == type_:
            return c
    return {}


def _age_seconds(generated: str | None, now: datetime) -> float | None:
    if generated is None:
        return None
    try:
        t = parse_rfc3339(generated, field="status.forecastGenerated")
    except InputError:
        return None
    return (now - t.to_pydatetime()).total_seconds()


def policy_row(obj: Mapping[str, Any], now: datetime) -> dict[str, Any]:
    """One policy → the ``--json`` object (docs/cli.md lists every key).

    ``now`` must be timezone-aware; ``forecast_age_seconds`` is ``now`` minus
    ``status.forecastGenerated`` (negative when the forecast claims a future time).
    """
    meta, spec, status = _map(obj.get("metadata")), _map(obj.get("spec")), _map(obj.get("status"))
    ready = _condition(status, "Ready")
    accurate = _condition(status, "ForecastAccurate")
    acc = _map(status.get("accuracy"))
    nxt = _map(status.get("nextChange"))
    generated = _str(status.get("forecastGenerated"))
    accuracy = None
    if acc or accurate:
        accuracy = {
            "status": _str(accurate.get("status")),
            "reason": _str(acc.get("reason")) or _str(accurate.get("reason")),
            "error": _num(acc.get("error")),
            "exceedance": _num(acc.get("exceedance")),
            "message": _str(acc.get("message")) or _str(accurate.get("message")),
        }
    lead = status.get("leadTime")
    change = {"at": _str(nxt.get("at")), "replicas": _int(nxt.get("replicas"))} if nxt else None
    return {
        "namespace": _str(meta.get("namespace")),
        "name": _str(meta.get("name")),
        "target": _str(_map(spec.get("targetRef")).get("name")),
        "mode": _str(spec.get("mode")),
        "ready": _str(ready.get("status")),
        "ready_reason": _str(ready.get("reason")),
        "ready_message": _str(ready.get("message")),
        "floor": _int(status.get("floor")),
        "proposed_floor": _int(status.get("proposedFloor")),
        "baseline": _int(status.get("baseline")),
        "next_change": change,
        "lead_time": lead if isinstance(lead, str | int | float | Mapping) else None,
        "forecast_generated": generated,
        "forecast_age_seconds": _age_seconds(generated, now),
        "accuracy": accuracy,
        "added_replica_hours": _num(status.get("addedReplicaHours")),
        "last_applied_time": _str(status.get("lastAppliedTime")),
        "explanation": _str(status.get("explanation")),
    }


def rows(items: Sequence[Mapping[str, Any]], now: datetime) -> list[dict[str, Any]]:
    """Every policy's row, by namespace then name (as ``kubectl get -A`` lists them)."""
    out = [policy_row(o, now) for o in items]
    return sorted(out, key=lambda r: (r["namespace"] or "", r["name"] or ""))


def _cut(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 3] + "..."


def _lead_cell(lead: Any) -> str:
    """``status.leadTime`` is ``{value, source, samples, podStartup}`` (leadTime: auto):
    the value, with its source when it is not a measurement (``1m (Default)``). A bare
    duration or number of seconds is shown too; anything else compactly, cut."""
    if isinstance(lead, Mapping) and isinstance(lead.get("value"), str):
        source = _str(lead.get("source"))
        return lead["value"] + (f" ({source})" if source and source != "Measured" else "")
    if lead is None:
        return NONE
    if isinstance(lead, int | float) and not isinstance(lead, bool):
        return format_duration(timedelta(seconds=float(lead)))
    if isinstance(lead, str):
        return lead
    return _cut(json.dumps(lead, separators=(",", ":"), sort_keys=True), 24)


def _accuracy_cell(acc: Mapping[str, Any] | None) -> str:
    if not acc:
        return NONE
    word = _ACCURACY_WORDS.get(acc.get("status") or "", acc.get("reason") or NONE)
    return f"{word} (WAPE {acc['error']:.2f})" if acc.get("error") is not None else word


def cells(row: Mapping[str, Any]) -> list[str]:
    """A ``policy_row`` as the table's text cells, in ``COLUMNS`` order."""

    def show(x: Any) -> str:
        return NONE if x is None else str(x)

    ready = show(row["ready"]) + (f" {row['ready_reason']}" if row["ready_reason"] else "")
    if row["floor"] is not None:
        floor = str(row["floor"])
    elif row["proposed_floor"] is not None:
        floor = f"{row['proposed_floor']} proposed"
    else:
        floor = NONE
    nxt = row["next_change"]
    change = f"{show(nxt['replicas'])} @ {show(nxt['at'])}" if nxt else NONE
    age = row["forecast_age_seconds"]
    added = row["added_replica_hours"]
    return [
        show(row["namespace"]),
        show(row["name"]),
        show(row["mode"]),
        ready if row["ready"] else NONE,
        floor,
        show(row["baseline"]),
        change,
        _lead_cell(row["lead_time"]),
        NONE if age is None else human_age(timedelta(seconds=age)),
        _accuracy_cell(row["accuracy"]),
        NONE if added is None else f"{added:.1f}",
        _cut(" ".join(row["explanation"].split()), EXPLANATION_WIDTH)
        if row["explanation"] else NONE,
    ]  # fmt: skip


def table(table_rows: Sequence[Mapping[str, Any]]) -> str:
    """Plain columns padded with spaces, like ``kubectl get``: stable under a pipe
    (no terminal width, no colour), so ``grep`` and ``awk`` work on it."""
    grid = [list(COLUMNS), *(cells(r) for r in table_rows)]
    widths = [max(len(line[i]) for line in grid) for i in range(len(COLUMNS))]
    return "\n".join("   ".join(c.ljust(w) for c, w in zip(line, widths, strict=True)).rstrip()
                     for line in grid) + "\n"  # fmt: skip
