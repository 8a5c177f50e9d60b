"""Small helpers shared by e2e tests.

Controllers converge asynchronously, so e2e assertions are "eventually" checks.
They must fail with a description of the last state seen, not a bare timeout, or
a red CI run tells nobody what the cluster was doing.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import TypeVar

T = TypeVar("T")


def eventually(
    probe: Callable[[], T | None],
    *,
    timeout: float,
    what: str,
    describe: Callable[[], str] | None = None,
    interval: float = 0.25,
) -> T:
    """Call ``probe`` until it returns something truthy; return that value.

    Exceptions from ``probe`` count as "not yet" (the API may be mid-restart) and
    the last one is reported. On timeout, ``describe()`` (e.g. an object's status
    and the controller log) is appended to the failure message.
    """
    deadline = time.monotonic() + timeout
    last: object = None
    while True:
        try:
            result = probe()
            if result:
                return result
            last = result
        except Exception as exc:
            last = exc
        if time.monotonic() > deadline:
            msg = f"timed out after {timeout:.0f} s waiting for {what}; last result: {last!r}"
            if describe is not None:
                try:
                    msg += "\n" + describe()
                except Exception as exc:
                    msg += f"\n(could not describe state: {exc!r})"
            raise AssertionError(msg)
        time.sleep(interval)
