"""``spec.accuracyGuard``: the model and its reader (docs/policy.md, "Accuracy guard").

Apart from ``policy.py`` to keep that file readable; the bounds are the CRD's
(tests/test_policy_guard.py holds the two together).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from typing import Any, Literal, cast

from floorcast.durations import format_duration
from floorcast.policy_fields import _M, _describe, _Reader

GuardAction = Literal["Baseline", "LiveCorrected"]
GUARD_ACTIONS: tuple[GuardAction, ...] = ("Baseline", "LiveCorrected")
#: Off by default: the guard's thresholds were not yet measured on the back-test
#: (docs/policy.md says so); when on, the defaults are conservative — a forecast off
#: by half the load on average, or load above the sized floor half of the time, over
#: an hour (common practice, no source).
DEFAULT_GUARD_ENABLED = False
DEFAULT_MAX_ERROR = 0.5
DEFAULT_MAX_EXCEEDANCE = 0.5
DEFAULT_GUARD_WINDOW = timedelta(hours=1)
DEFAULT_RECOVER_AFTER = timedelta(minutes=30)
DEFAULT_GUARD_ACTION: GuardAction = "Baseline"
#: maxError above 10 (a WAPE of 1000 %) would never trip: a typo, not a setting.
MAX_GUARD_ERROR = 10.0
#: The window holds 12 buckets; under a minute they would be shorter than the HPA's
#: own 15 s sync and an observation would weigh more than a bucket.
MIN_GUARD_WINDOW = timedelta(minutes=1)
_FIELDS = ("enabled", "maxError", "maxExceedance", "window", "recoverAfter", "action")


@dataclass(frozen=True)
class AccuracyGuard:
    enabled: bool = DEFAULT_GUARD_ENABLED
    max_error: float = DEFAULT_MAX_ERROR
    max_exceedance: float = DEFAULT_MAX_EXCEEDANCE
    window: timedelta = DEFAULT_GUARD_WINDOW
    recover_after: timedelta = DEFAULT_RECOVER_AFTER
    action: GuardAction = DEFAULT_GUARD_ACTION


def guard_defaults() -> dict[str, Any]:
    return {
        "enabled": DEFAULT_GUARD_ENABLED,
        "maxError": DEFAULT_MAX_ERROR,
        "maxExceedance": DEFAULT_MAX_EXCEEDANCE,
        "window": format_duration(DEFAULT_GUARD_WINDOW),
        "recoverAfter": format_duration(DEFAULT_RECOVER_AFTER),
        "action": DEFAULT_GUARD_ACTION,
    }


def read_guard(r: _Reader, s: _M) -> AccuracyGuard:
    if s.get("accuracyGuard") is None:
        return AccuracyGuard()
    g = r.child(s, p := "spec.accuracyGuard", _FIELDS)
    window = r.duration(g, f"{p}.window", default=DEFAULT_GUARD_WINDOW, allow_zero=False)
    if window < MIN_GUARD_WINDOW:
        r.fail(f"{p}.window", f"{format_duration(window)} is too short; expected at least "
                              f"{format_duration(MIN_GUARD_WINDOW)}")  # fmt: skip
    # Only an absent (or null) action takes the default: "" is refused, as the CRD's
    # enum refuses it (e2e/test_policy_crd.py holds the two verdicts together).
    action = g.get("action")
    action = DEFAULT_GUARD_ACTION if action is None else action
    if action not in GUARD_ACTIONS:
        r.fail(f"{p}.action", f"got {_describe(action)}; expected one of "
                              f"{', '.join(GUARD_ACTIONS)}")  # fmt: skip
    return AccuracyGuard(
        enabled=r.boolean(g, f"{p}.enabled", DEFAULT_GUARD_ENABLED),
        max_error=r.number(g, f"{p}.maxError", above=0, maximum=MAX_GUARD_ERROR,
                           default=DEFAULT_MAX_ERROR),
        max_exceedance=r.number(g, f"{p}.maxExceedance", above=0, maximum=1,
                                default=DEFAULT_MAX_EXCEEDANCE),
        window=window,
        recover_after=r.duration(g, f"{p}.recoverAfter", default=DEFAULT_RECOVER_AFTER,
                                 allow_zero=True),
        action=cast(GuardAction, action),
    )
