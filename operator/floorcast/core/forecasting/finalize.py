"""The engine's last step: each series' forecast from the candidate it ranked best.

Split from ``engine`` by concern: ranking is ``select``'s, this turns a ranking into
forecasts (falling back down each series' order when a method rejects its full
history) and into the ``combination``'s average of its members.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from floorcast.core import forecasting
from floorcast.core.forecasting import combine
from floorcast.core.forecasting.select import Selection, call_rows


def combination_first(sel: Selection) -> Selection:
    """``--method combination``: the combination first for every series, then the
    others in their ranked order (the fallbacks when it cannot be made)."""
    if combine.COMBINATION not in sel.names:
        return sel
    c = sel.names.index(combine.COMBINATION)
    rest = sel.order[sel.order != c].reshape(len(sel.order), -1)
    order = np.concatenate([np.full((len(rest), 1), c), rest], axis=1)
    evaluated = sel.evaluated & sel.backtests[combine.COMBINATION].ok
    return dataclasses.replace(sel, order=order, evaluated=evaluated)


def members(sel: Selection, i: int, method: str) -> dict[str, Any]:
    """The combination's members, for the metadata (nothing for other methods)."""
    if method != combine.COMBINATION:
        return {}
    return {"combination": [sel.names[j] for j in np.flatnonzero(sel.parts[i] > 0)]}


def final_forecasts(
    sel: Selection, y: np.ndarray, *, season: int, horizon: int
) -> tuple[np.ndarray, np.ndarray, dict[str, str]]:
    """Forecast with each row's best candidate; a row its choice rejects on the full
    history tries the next best, so one odd series cannot sink the whole batch. Each
    method runs once per group of rows that need it (a combination needs several);
    returns (point (N, H), chosen index or -1, first failure per method)."""
    n = len(y)
    names = sel.names
    cache = np.full((len(names), n, horizon), np.nan)
    tried = np.zeros((len(names), n), dtype=bool)
    why = dict(sel.failures)

    def run(j: int, rows: np.ndarray) -> np.ndarray:
        todo = rows[~tried[j, rows]]
        if todo.size:
            got, _, reason = call_rows(
                forecasting.method(names[j]), y[todo], season=season, horizon=horizon
            )
            cache[j, todo], tried[j, todo] = got, True
            if reason:
                why.setdefault(names[j], reason)
        return cache[j, rows]

    final = np.full(n, -1)
    point = np.zeros((n, horizon))
    combo = names.index(combine.COMBINATION) if combine.COMBINATION in names else -1
    for rank in range(len(names)):
        left = final < 0
        for j in np.unique(sel.order[left, rank]):
            rows = np.flatnonzero(left & (sel.order[:, rank] == j))
            if j == combo:
                w = sel.parts[rows]
                got = np.zeros((len(rows), horizon))
                for m in np.flatnonzero((w > 0).any(axis=0)):
                    use = w[:, m] > 0
                    part = np.zeros((len(rows), horizon))
                    part[use] = run(m, rows[use])
                    got += w[:, m, None] * part
            else:
                got = run(j, rows)
            ok = np.all(np.isfinite(got), axis=1)
            point[rows[ok]], final[rows[ok]] = got[ok], j
    return point, final, why
