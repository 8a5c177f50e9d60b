"""``floorcast forecast``: recorded history in, stored forecast with bands out.

Three ways in (one file, a folder of files, a Prometheus-compatible server) and one
engine: everything goes through ``core.forecasting.engine.forecast_batch`` so a
fleet of thousands of workloads is forecast in one vectorized pass.
"""

from __future__ import annotations

import json
import logging
from pathlib import Path
from typing import Any

import click
import pandas as pd
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn
from rich.table import Table

from floorcast.cli.options import duration
from floorcast.core.forecasting import METHODS, band_levels
from floorcast.core.forecasting.combine import COMBINATION
from floorcast.core.forecasting.engine import BatchForecast, forecast_batch
from floorcast.core.forecasting.handover import crossfade
from floorcast.core.series import Series
from floorcast.core.series_text import MAX_FORECAST_POINTS
from floorcast.durations import format_duration, parse_duration
from floorcast.errors import InputError
from floorcast.sources.files import read_forecast, read_history, write_forecast
from floorcast.timefmt import iso, parse_rfc3339

HELP = "Forecast load from recorded history (CSV/JSON files or a Prometheus server)."
METHOD_CHOICES = ["auto", COMBINATION, *sorted(METHODS)]


#: A year ahead is beyond any seasonal method's reach; longer is a typo.
MAX_HORIZON = pd.Timedelta(days=366).to_pytimedelta()


def parse_season(text: str) -> str | pd.Timedelta | None:
    """``auto``, ``none``, or a duration such as ``1d``/``1w``/``12h``."""
    t = text.strip().lower()
    if t in ("auto", "none"):
        return "auto" if t == "auto" else None
    return pd.Timedelta(parse_duration(text, field="--season"))


def parse_quantiles(text: str) -> tuple[float, float]:
    if len(text) > 40:  # whatever it is, not two quantiles; and not echoed in full
        raise InputError(f"--quantiles: expected two numbers like 0.1,0.9, got {text[:37]!r}...")
    try:
        lo, hi = (float(x) for x in text.split(","))
    except ValueError:
        raise InputError(f"--quantiles: expected two numbers like 0.1,0.9, got {text!r}") from None
    if not 0 < lo < hi < 1:
        raise InputError(f"--quantiles: need 0 < lower < upper < 1, got {text!r}")
    return lo, hi


def parse_levels(text: str) -> tuple[float, ...]:
    """``--levels 0.5,0.9,0.95`` -> the quantile levels written beside the band;
    ``none`` writes none (docs/formats.md, "Quantiles")."""
    if text.strip().lower() == "none":
        return ()
    if len(text) > 400:
        raise InputError(f"--levels: expected numbers like 0.5,0.95, got {text[:37]!r}...")
    try:
        return band_levels.check_levels([float(x) for x in text.split(",")])
    except (ValueError, InputError) as e:
        raise InputError(f"--levels: {e if isinstance(e, InputError) else 'not a number'} "
                         f"in {text!r}") from None  # fmt: skip


def check_horizon(horizon: str, histories: list[Series]) -> None:
    """The output's size, before anything is allocated: a forecast of more points than
    a forecast may hold (core/series_text.MAX_FORECAST_POINTS) could be neither stored
    nor read back, and 2000000h at 5m would need gigabytes first."""
    h = pd.Timedelta(parse_duration(horizon, field="--horizon"))
    for s in histories:
        n = h / s.step
        if n > MAX_FORECAST_POINTS:
            raise InputError(f"--horizon {horizon} is {n:.0f} steps of {format_duration(s.step)}, "
                             f"over the limit of {MAX_FORECAST_POINTS} forecast points",
                             source=s.source)  # fmt: skip


def parse_windows(values: tuple[str, ...]) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """``--exclude START/END``: past one-off events that must not become a pattern."""
    out = []
    for v in values:
        if "/" not in v:
            raise InputError(f"--exclude: expected START/END (RFC 3339), got {v!r}")
        a, b = v.split("/", 1)
        start, end = (
            parse_rfc3339(a, field="--exclude start"),
            parse_rfc3339(b, field="--exclude end"),
        )
        if end <= start:
            raise InputError(f"--exclude: end {b} is not after start {a}")
        out.append((start, end))
    return out


def read_histories(paths: list[Path], max_gap: pd.Timedelta, console: Console) -> list[Series]:
    """Read every file with a progress bar: for a big fleet this is the slow part."""
    out = []
    with Progress(
        TextColumn("reading history"), BarColumn(), MofNCompleteColumn(), console=console,
        transient=True, disable=len(paths) < 20,
    ) as bar:  # fmt: skip
        task = bar.add_task("read", total=len(paths))
        for p in paths:
            out.append(read_history(p, max_gap=max_gap))
            bar.advance(task)
    return out


def history_from_prometheus(
    url: str, query: str, lookback: str, step: str, end: str | None, max_gap: pd.Timedelta
) -> Series:
    from floorcast.sources import prometheus

    now = parse_rfc3339(end, field="--end") if end else pd.Timestamp.now(tz="UTC")
    start, stop = prometheus.lookback_range(now, lookback, step)
    # Retries are logged as warnings; on a terminal they would break the one-line error
    # contract, so only a final failure is reported (as the command's error).
    logging.getLogger("floorcast.sources").setLevel(logging.ERROR)
    return prometheus.fetch_range(url, query, start=start, end=stop, step=step, max_gap=max_gap)


def print_scores(result: BatchForecast, names: list[str], console: Console) -> None:
    """The numbers an engineer needs before trusting a forecast, per series and method."""
    table = Table("series", "method", "MASE", "sMAPE %", "coverage", "chosen")
    for i, name in enumerate(names):
        scores = result.scores[i]
        for method, s in sorted(scores.items(), key=lambda kv: _key(kv[1])):
            table.add_row(
                name,
                method,
                _fmt(s.get("mase")),
                _fmt(s.get("smape")),
                _fmt(s.get("coverage"), pct=True),
                "✓" if method == result.method[i] else "",
            )
    console.print(table)
    lo, hi = result.quantiles
    console.print(
        f"MASE < 1 beats the seasonal-naive forecast; coverage is the share of held-out "
        f"points inside the {lo:.0%}–{hi:.0%} band (ideal {hi - lo:.0%})."
    )


def _key(s: dict[str, Any]) -> float:
    v = s.get("mase")
    return float("inf") if v is None else float(v)


def _fmt(v: Any, pct: bool = False) -> str:
    if v is None:
        return "–"
    return f"{100 * v:.1f} %" if pct else f"{v:.3f}"


@click.command("forecast", help=HELP)
@click.option("--history", type=click.Path(path_type=Path), help="History CSV or JSON.")
@click.option(
    "--history-dir",
    type=click.Path(path_type=Path, file_okay=False),
    help="Forecast every .csv/.json history in this folder.",
)
@click.option("--prometheus", "prom_url", help="Base URL of a Prometheus-compatible API.")
@click.option("--query", help="PromQL returning one series (with --prometheus).")
@click.option("--lookback", default="14d", show_default=True, help="History to read.")
@click.option("--step", default="5m", show_default=True, help="Query resolution.")
@click.option("--end", default=None, help="End of the history [now] (RFC 3339).")
@click.option(
    "--method",
    type=click.Choice(METHOD_CHOICES),
    default="auto",
    show_default=True,
    help="auto: the lowest held-out WAPE + quantile loss per series (docs/forecasting.md); "
    "combination: the mean of its three best methods.",
)
@click.option(
    "--season", default="auto", show_default=True, help="auto, none, 1d, 1w or a duration."
)
@click.option("--horizon", default="24h", show_default=True, help="How far ahead.",
              callback=duration(maximum=MAX_HORIZON))
@click.option("--quantiles", default="0.1,0.9", show_default=True, help="Band quantiles.")
@click.option("--levels", default=",".join(map(str, band_levels.DEFAULT_LEVELS)),
              show_default=True, help="Quantile levels written beside the band, or none.")
@click.option("--exclude", multiple=True, help="START/END of a past one-off event (repeatable).")
@click.option("--max-gap", default="30m", show_default=True, help="Longest gap filled.")
@click.option("--generated", default=None, help="Forecast creation time [now] (RFC 3339).")
@click.option("--output", type=click.Path(path_type=Path), help="Forecast file (.csv/.json).")
@click.option(
    "--output-dir",
    type=click.Path(path_type=Path, file_okay=False),
    help="Folder for batch forecasts.",
)
@click.option(
    "--format",
    "fmt",
    type=click.Choice(["json", "csv"]),
    default="json",
    show_default=True,
    help="File format in --output-dir.",
)
@click.option(
    "--previous",
    type=click.Path(path_type=Path),
    help="The forecast this one replaces: cross-fade from it (see --overlap).",
)
@click.option(
    "--overlap",
    default="1h",
    show_default=True,
    help="How long the hand-over from --previous lasts.",
)
@click.option("--evaluate", is_flag=True, help="Print MASE, sMAPE and band coverage.")
@click.option("--json", "as_json", is_flag=True, help="With --evaluate: scores as JSON.")
def forecast(**o: Any) -> None:
    sources = [k for k in ("history", "history_dir", "prom_url") if o[k]]
    if len(sources) != 1:
        raise InputError("give exactly one of --history, --history-dir or --prometheus")
    if o["prom_url"] and not o["query"]:
        raise InputError("--prometheus needs --query")
    if o["history_dir"] and not (o["output_dir"] or o["evaluate"]):
        raise InputError("--history-dir needs --output-dir (or --evaluate)")
    if not o["history_dir"] and not (o["output"] or o["evaluate"]):
        raise InputError("--output is required (or --evaluate to only score)")
    if o["previous"] and not o["output"]:
        raise InputError("--previous works with --output (one forecast at a time)")
    if o["output"] and o["output"].suffix.lower() not in (".csv", ".json"):
        raise InputError(f"--output: {o['output']} must end in .csv or .json")
    max_gap = pd.Timedelta(parse_duration(o["max_gap"], field="--max-gap", allow_zero=True))
    season = parse_season(o["season"])
    quantiles = parse_quantiles(o["quantiles"])
    levels = parse_levels(o["levels"])
    windows = parse_windows(o["exclude"])
    generated = (
        parse_rfc3339(o["generated"], field="--generated")
        if o["generated"]
        else pd.Timestamp.now(tz="UTC").floor("s")
    )
    console = Console(stderr=True)
    if o["history_dir"]:
        d: Path = o["history_dir"]
        if not d.is_dir():
            raise InputError(f"--history-dir: {d} is not a folder")
        paths = sorted(p for p in d.iterdir() if p.suffix.lower() in (".csv", ".json"))
        if not paths:
            raise InputError(f"--history-dir: no .csv or .json files in {d}")
        histories = read_histories(paths, max_gap, console)
        names = [p.stem for p in paths]
    elif o["prom_url"]:
        histories = [
            history_from_prometheus(
                o["prom_url"], o["query"], o["lookback"], o["step"], o["end"], max_gap
            )
        ]
        names = [o["query"]]
    else:
        histories = [read_history(o["history"], max_gap=max_gap)]
        names = [Path(o["history"]).stem]
    check_horizon(o["horizon"], histories)
    with console.status(f"forecasting {len(histories)} series ({o['method']})"):
        try:
            result = forecast_batch(
                histories,
                horizon=o["horizon"],
                method=o["method"],
                season=season,
                quantiles=quantiles,
                levels=levels,
                event_windows=windows or None,
                generated=generated,
            )
        except InputError as e:
            if e.source:
                raise
            # The engine speaks of series by row; say which file (or folder) that is.
            where = histories[0].source if len(histories) == 1 else str(o["history_dir"])
            raise InputError(str(e), source=where) from None
    if o["evaluate"]:
        if o["as_json"]:
            doc = {n: {"chosen": result.method[i], "scores": result.scores[i]}
                   for i, n in enumerate(names)}  # fmt: skip
            click.echo(json.dumps(doc, indent=2))
        else:
            print_scores(result, names, Console())
    if o["history_dir"] and o["output_dir"]:
        out_dir: Path = o["output_dir"]
        out_dir.mkdir(parents=True, exist_ok=True)
        for i, n in enumerate(names):
            write_forecast(result.series(i), out_dir / f"{n}.{o['fmt']}")
        console.print(f"wrote {len(names)} forecasts to {out_dir}")
    elif o["output"]:
        fc = result.series(0)
        if o["previous"]:
            # A new forecast must not make the floor jump to a value neither forecast
            # contains: ease from the old one over the overlap (core/forecasting/handover).
            old = read_forecast(o["previous"])
            overlap = parse_duration(o["overlap"], field="--overlap", allow_zero=True)
            fc = crossfade(old, fc, overlap=pd.Timedelta(overlap))
        write_forecast(fc, o["output"])
        console.print(
            f"{names[0]}: {result.method[0]} (season {int(result.season[0])} steps), "
            f"{len(fc)} points {iso(fc.start)} → {iso(fc.end)} written to {o['output']}"
        )
