"""``--method auto``: score every candidate by rolling origin and keep the best per series.

Choice is per series, not per batch: a fleet mixes smooth daily services with spiky
batch workers, and one method for all would serve neither. It stays vectorized
because every candidate is evaluated on the whole batch, and the final forecast is
made once per group of series that chose the same method.

The ranking key is the mean of two held-out errors, both as a share of the load
served: WAPE of the point forecast and the weighted quantile loss of the band's two
edges (``evaluation``), the latter from bands sized leave-one-origin-out exactly as
the engine sizes them. A floor is planned on the upper band, so a method with a good
point but badly placed bands should lose; MASE (kept in the scores) ranked the point
alone, and on real traces it let Holt-Winters win where one-week seasonal naive was
better (issue 13). Where the key is not finite for every candidate (a series with no
load to weigh by, fewer than two origins) WAPE, then MAE decides instead. Equal
scores go to the earlier candidate, so list the simpler methods first. Methods are
looked up only through the registry, ``floorcast.core.forecasting.method``; the
``combination`` candidate (``combine``) is built here from the others' backtests.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from floorcast.core import forecasting
from floorcast.core.forecasting import bands, combine
from floorcast.core.forecasting.base import ForecastError, HistoryTooShort, MethodFn
from floorcast.core.forecasting.evaluation import Backtest, rolling_origin

#: Candidates per series scored on held-out bands too (and ranked on the full key).
SHORTLIST = 3
#: Added to the point-error key of candidates off the shortlist: ranked behind it.
_BEHIND = 1e12


def call_rows(
    fn: MethodFn, y: np.ndarray, *, season: int, horizon: int
) -> tuple[np.ndarray, np.ndarray, str | None]:
    """Run a method on a batch and isolate the rows it rejects.

    Methods raise ``ForecastError`` for the whole batch when one series is unusable,
    so a failing batch is split in halves until the bad rows are found (about
    log₂ N extra calls per bad row). Returns (forecast with NaN rows where it failed,
    ok (N,), the first failure message). Any other exception is a bug and propagates.
    """
    n = y.shape[0]
    out = np.full((n, horizon), np.nan)
    ok = np.zeros(n, dtype=bool)
    reason: list[str] = []

    def run(rows: np.ndarray) -> None:
        try:
            got = np.asarray(fn(y[rows], season=season, horizon=horizon), dtype=np.float64)
        except HistoryTooShort as e:
            reason.append(str(e))  # every row has this length: no halving
            return
        except ForecastError as e:
            if len(rows) == 1:
                reason.append(str(e))
                return
            half = len(rows) // 2
            run(rows[:half])
            run(rows[half:])
            return
        if got.shape != (len(rows), horizon):
            raise ForecastError(
                f"method returned shape {got.shape}, expected {(len(rows), horizon)}"
            )
        good = np.all(np.isfinite(got), axis=1)  # the contract says never; guard anyway
        out[rows[good]] = got[good]
        ok[rows[good]] = True
        if not good.all():
            reason.append("method returned non-finite values")

    if n:
        run(np.arange(n))
    return out, ok, (reason[0] if reason else None)


@dataclass(frozen=True, eq=False)
class Selection:
    """The candidates' backtests, their scores and the order of preference per series."""

    names: tuple[str, ...]
    order: np.ndarray  # (N, M) candidate indices, best first
    evaluated: np.ndarray  # (N,) bool: the best one was actually scored
    backtests: dict[str, Backtest]
    scores: dict[str, dict[str, np.ndarray]]  # name -> metric -> (N,)
    failures: dict[str, str] = field(default_factory=dict)  # name -> first reason
    #: (N, M) weights of the candidates in each series' combination (rows sum to 1,
    #: or to 0 where there is none); empty when ``combination`` is not a candidate
    parts: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    #: name -> (2, N) held-out stretch of the lower and upper band edge
    calibration: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def chosen(self) -> np.ndarray:
        """(N,) index of the best candidate; -1 where no candidate could be scored."""
        return np.where(self.evaluated, self.order[:, 0], -1)

    def method_of(self, i: int) -> str | None:
        c = int(self.chosen[i])
        return self.names[c] if c >= 0 else None

    def failed(self, i: int) -> dict[str, str]:
        """Why each candidate that could not forecast series ``i`` at every origin failed."""
        return {
            n: self.failures.get(n, "no forecast")
            for n in self.names
            if n in self.backtests and not self.backtests[n].ok[i] and n != combine.COMBINATION
        }

    def row_scores(self, i: int) -> dict[str, dict[str, float | None]]:
        """Series ``i``'s scores, JSON-ready (None where undefined)."""
        return {
            n: {k: (float(v[i]) if np.isfinite(v[i]) else None) for k, v in m.items()}
            for n, m in self.scores.items()
        }


def evaluate(
    y: np.ndarray,
    names: Sequence[str],
    *,
    season: int,
    horizon: int,
    at: np.ndarray,
    valid: np.ndarray | None = None,
) -> tuple[dict[str, Backtest], dict[str, str]]:
    """Rolling-origin backtest of each named method over the same origins; also the
    first failure message per method that rejected some series."""
    backtests: dict[str, Backtest] = {}
    failures: dict[str, str] = {}
    for name in names:
        fn = forecasting.method(name)
        first: list[str] = []

        def call(train: np.ndarray, fn: MethodFn = fn, first: list[str] = first) -> np.ndarray:
            out, _, why = call_rows(fn, train, season=season, horizon=horizon)
            if why and not first:
                first.append(why)
            return out

        backtests[name] = rolling_origin(
            y, call, season=season, horizon=horizon, at=at, valid=valid
        )
        if first:
            failures[name] = first[0]
    return backtests, failures


def rank_key(
    scores: dict[str, dict[str, np.ndarray]],
    names: Sequence[str],
    ok: np.ndarray | None = None,
) -> np.ndarray:
    """(N, M) key to minimise: (WAPE + weighted quantile loss) / 2; on rows where that
    is not finite for every candidate that forecast the series (``ok``), WAPE; where
    neither is, MAE."""

    def stack(metric: str) -> np.ndarray:
        return np.stack(
            [scores[n].get(metric, np.full(len(scores[n]["mae"]), np.nan)) for n in names], axis=1
        )

    mixed = (stack("wape") + stack("wql")) / 2
    key = stack("mae")
    counted = np.ones(key.shape, dtype=bool) if ok is None else ok
    for better in (stack("wape"), mixed):
        use = np.all(np.isfinite(better) | ~counted, axis=1, keepdims=True)
        key = np.where(use, better, key)
    return np.where(np.isnan(key), np.inf, key)


def unevaluated(names: Sequence[str], n: int, prefer: str | None = None) -> Selection:
    """The choice when history is too short to score anything: ``prefer`` first, then
    the candidates in the order given."""
    names = tuple(names)
    first = sorted(range(len(names)), key=lambda j: names[j] != prefer)
    return Selection(
        names=names,
        order=np.tile(np.array(first), (n, 1)),
        evaluated=np.zeros(n, dtype=bool),
        backtests={},
        scores={},
    )


def select(
    y: np.ndarray,
    names: Sequence[str],
    *,
    season: int,
    horizon: int,
    at: np.ndarray,
    valid: np.ndarray | None = None,
    quantiles: tuple[float, float] = bands.DEFAULT_QUANTILES,
    pool: int | None = None,
    combination: bool = False,
) -> Selection:
    """Evaluate ``names`` at origins ``at``; rank them per series, lowest key first.

    A candidate that failed on a series at any origin ranks last for it (after the
    scored ones, in candidate order), so it is only tried if all others fail too.
    Scores are MASE, sMAPE, MAE, WAPE and the held-out band scores (``coverage``,
    ``wql``). ``combination`` adds the mean of each series' best
    few methods as one more candidate, last (needs three methods and two origins).
    """
    if not names:
        raise ForecastError("no candidate methods to choose from")
    names = tuple(names)
    backtests, failures = evaluate(y, names, season=season, horizon=horizon, at=at, valid=valid)
    n = y.shape[0]
    scores = {m: backtests[m].scores() for m in names}
    ok = np.stack([backtests[m].ok for m in names], axis=1)
    point_key = np.where(ok, rank_key(scores, names, ok), np.inf)
    # Held-out bands cost a band fit per origin, so only each series' SHORTLIST best
    # by point error (which are also its combination's members) get them and compete
    # on the full key; the rest stay ranked behind them, by point error.
    short = combine.weights(point_key, SHORTLIST, least=1) > 0
    if combination and len(names) >= combine.PARTS and len(at) >= 2:
        parts = combine.weights(point_key)
        bt = combine.backtest(backtests, names)
        backtests[combine.COMBINATION] = bt
        scores[combine.COMBINATION] = bt.scores()
        names = (*names, combine.COMBINATION)
        usable = bt.ok & (parts > 0).any(axis=1)
        ok = np.concatenate([ok, usable[:, None]], axis=1)
        short = np.concatenate([short, usable[:, None]], axis=1)
        point_key = np.concatenate([point_key, np.where(usable, 0.0, np.inf)[:, None]], axis=1)
        parts = np.concatenate([parts, np.zeros((n, 1))], axis=1)
    else:
        parts = np.zeros((0, 0))
    period = bands.phase_period(season)
    calibration: dict[str, np.ndarray] = {}
    for j, m in enumerate(names):
        rows = np.flatnonzero(short[:, j])
        held = {k: np.full(n, np.nan) for k in ("coverage", "wql")}
        calibration[m] = np.ones((2, n))
        if rows.size:
            got = bands.holdout(backtests[m].rows(rows), quantiles, pool=pool, period=period)
            for k in held:
                held[k][rows] = got[k]
            calibration[m][:, rows] = got["calibration"]
        scores[m].update(held)
    full = rank_key(scores, names, short)
    key = np.where(short, full, np.where(ok, _BEHIND + point_key, np.inf))
    # Stable sort: equal keys keep candidate order. An inf key (failed, or no valid
    # point to score) keeps the rows ranked but marks them not evaluated.
    order = np.argsort(key, axis=1, kind="stable")
    evaluated = np.isfinite(np.take_along_axis(key, order[:, :1], axis=1))[:, 0]
    return Selection(
        names=names,
        order=order,
        evaluated=evaluated,
        backtests=backtests,
        scores=scores,
        failures=failures,
        parts=parts,
        calibration=calibration,
    )
