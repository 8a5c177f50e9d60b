"""The explanation in the operator's decision (docs/policy.md, "Why this floor"): on
every floor change's Event, in status, and not rewritten while the floor holds."""

from __future__ import annotations

from dataclasses import replace

import pandas as pd
from test_reconcile import NOW, hpa, observed, policy

from floorcast.controller.decide import decide


def test_the_raise_event_and_status_carry_the_line():
    d = decide(observed(policy()))
    raised = [e for e in d.events if e.reason == "FloorRaised"]
    assert raised and "; why: value 6.5 in the 1m from" in raised[0].message
    assert raised[0].message.endswith("= 6.5 → 7 replicas → floor 7")
    assert d.status["explanation"] in raised[0].message


def test_the_explanation_is_a_record_of_the_change_not_rewritten_each_minute():
    first = decide(observed(policy()))
    # A minute later the same floor holds (the need now comes from a later instant).
    ours = {"floorcast.dev/baseline": "2", "floorcast.dev/applied-floor": "7",
            "floorcast.dev/policy": "p"}
    raised = hpa(min_replicas=7, **ours)
    later = decide(replace(observed(policy(), raised), now=NOW + pd.Timedelta("1m"),
                           status=first.status))  # fmt: skip
    assert later.floor == 7 and later.status["explanation"] == first.status["explanation"]
    assert not later.status_changed
    # After the peak the floor falls back: a new line says why.
    after = decide(replace(observed(policy()), now=NOW + pd.Timedelta("20m"),
                           status=first.status))  # fmt: skip
    assert after.floor == 2 and after.status["explanation"] != first.status["explanation"]
    assert after.status["explanation"].endswith("= 1.5 → 2 replicas → floor 2")


def test_dry_run_records_the_proposed_floors_line():
    d = decide(observed(policy("DryRun")))
    assert d.status["proposedFloor"] == 7 and d.status["explanation"].endswith("→ floor 7")
