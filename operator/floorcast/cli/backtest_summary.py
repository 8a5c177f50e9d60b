"""The tuned-HPA comparison in words and numbers, shared by the CLI and the report.

``floorcast backtest`` (table and ``--json``) and the HTML report both state what
lowering the HPA's target instead of installing floorcast would have cost; the
figures and the sentence live here, below both, so neither has to import the other.
"""

from __future__ import annotations

from typing import Any

from floorcast import replay

ORACLE_LABEL = "perfect foresight (reference only: plans on the load that really followed)"
KEYS = ("under_capacity_minutes", "over_target_minutes", "replica_hours",
        "peak_utilization", "scale_events")  # fmt: skip


def tuned_summary(r: replay.Result) -> dict[str, Any]:
    """The comparison with the obvious alternative (docs/backtest.md names each key)."""
    fc, orc = r.tuned["floorcast"], r.tuned["oracle"]
    cap = None
    if fc["saving"] is not None and orc["saving"] is not None and orc["saving"] > 0:
        cap = fc["saving"] / orc["saving"]
    return {
        "tuned_hpa": {
            **fc["hpa"],
            "ladder": [{k: x[k] for k in ("target_utilization", *KEYS)} for x in r.ladder],
        },
        "saving_at_equal_saturation": fc["saving"],
        "oracle": {
            "label": ORACLE_LABEL,
            **r.scores[r.row("oracle")],
            "tuned_hpa": orc["hpa"],
            "saving_at_equal_saturation": orc["saving"],
        },
        "oracle_capture": cap,
    }


def saving_pct(x: float | None, found: str) -> str:
    """A saving as a signed percentage; "≥" when the true saving is only bounded."""
    if x is None:
        return "n/a"
    # Beyond the ladder the HPA alone was tuned as far as it goes and still saturated
    # more: the true saving is at least this.
    return f"{'≥ ' if found == 'beyond_ladder' else ''}{x:+.0%}"


def equal_saturation_line(r: replay.Result) -> str:
    """One sentence: what lowering the HPA's target instead would have cost."""
    doc = tuned_summary(r)
    hpa = doc["tuned_hpa"]
    how = {
        "interpolated": f"at target {hpa['target_utilization']:.0%}",
        "top": f"already at target {hpa['target_utilization']:.0%}",
        "beyond_ladder": f"not even at {hpa['target_utilization']:.0%} (its lowest rung)",
    }[hpa["found"]]
    cap, orc = doc["oracle_capture"], doc["oracle"]
    return (
        f"HPA alone saturates as little as floorcast {how}: {hpa['replica_hours']:.1f} "
        f"replica-hours; floorcast saves "
        f"{saving_pct(doc['saving_at_equal_saturation'], hpa['found'])} at equal saturation "
        f"(oracle {saving_pct(orc['saving_at_equal_saturation'], orc['tuned_hpa']['found'])}"
        f", captured {'n/a' if cap is None else f'{cap:.0%}'})"
    )
