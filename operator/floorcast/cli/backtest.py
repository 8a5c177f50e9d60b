"""``floorcast backtest``: what floors would have bought and cost on recorded load.

Replays the history through the documented reactive HPA three ways — alone, with
floorcast's floors (from rolling forecasts that never see the future) and with a
static peak-sized floor — so the engineer sees under-capacity minutes against
replica-hours before anything touches production.
"""

from __future__ import annotations

import json
import sys
from datetime import timedelta
from pathlib import Path
from typing import Any

import click
import numpy as np
import pandas as pd
from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
from rich.table import Table

from floorcast import replay, replay_guard
from floorcast.cli.backtest_summary import equal_saturation_line, saving_pct, tuned_summary
from floorcast.cli.options import PER_REPLICA, REPLICAS, duration
from floorcast.durations import format_duration, parse_duration
from floorcast.errors import InputError
from floorcast.hpa_manifest import load_hpa_file
from floorcast.policy import load_policy_file
from floorcast.policy_fields import MAX_SERVICE_LEVEL, MIN_SERVICE_LEVEL
from floorcast.policy_guard import MAX_GUARD_ERROR
from floorcast.sources.files import read_history
from floorcast.timefmt import iso, parse_rfc3339

#: How `backtest` fills short gaps in recorded history (see run()).
REPLAY_GAP_FILL = "ffill"
HELP = "Replay history through the reactive HPA, with and without floors."


SWEEP_KEYS = ("leadTime", "headroom", "holdTime", "targetUtilization", "serviceLevel",
              "accuracyGuard.maxError", "accuracyGuard.maxExceedance")


def _numbers(key: str, vals: str, parts: list[str], *, lo: float, lo_open: bool) -> list[float]:
    try:
        out = [float(v) for v in parts]
    except ValueError:
        raise InputError(f"--sweep {key}: not a number in {vals!r}") from None
    if any(not np.isfinite(x) or x < lo or (lo_open and x == lo) for x in out):
        raise InputError(f"--sweep {key}: values must be {'>' if lo_open else '>='} {lo:g}")
    return out


def parse_sweep(items: tuple[str, ...], own: replay.Knobs) -> list[replay.Knobs]:
    """``leadTime=2m,5m headroom=0,0.1 holdTime=0,15m targetUtilization=70,85
    serviceLevel=0.9,0.95 accuracyGuard.maxError=0.3,0.5`` -> the grid's configurations
    (every combination; unswept settings keep ``own``'s). A swept guard threshold
    replays the guard on its rows even when the policy leaves it off."""
    leads, heads, holds, targets = [own.lead], [own.headroom], [own.hold], [own.target]
    levels: list[float | None] = [own.service_level]
    errors: list[float | None] = [own.max_error]
    exceeds: list[float | None] = [own.max_exceedance]
    for item in items:
        key, _, vals = item.partition("=")
        key = key.removeprefix("accuracyGuard.") if key in SWEEP_KEYS else key
        parts = [v for v in vals.split(",") if v]
        if not parts:
            raise InputError(f"--sweep {item!r}: expected NAME=V1,V2,...")
        if key == "leadTime":
            leads = [parse_duration(v, field="--sweep leadTime") for v in parts]
        elif key == "holdTime":
            holds = [timedelta(0) if v == "0" else parse_duration(v, field="--sweep holdTime")
                     for v in parts]  # fmt: skip
        elif key == "headroom":
            heads = _numbers(key, vals, parts, lo=0.0, lo_open=False)
        elif key == "targetUtilization":  # percent, like --target-utilization
            pcts = _numbers(key, vals, parts, lo=0.0, lo_open=True)
            if any(p > 1000 for p in pcts):
                raise InputError("--sweep targetUtilization: values must be <= 1000 (percent)")
            targets = [p / 100.0 for p in pcts]
        elif key == "serviceLevel":  # the policy field's bounds (docs/policy.md)
            levels = [*_numbers(key, vals, parts, lo=MIN_SERVICE_LEVEL, lo_open=False)]
            if any(v > MAX_SERVICE_LEVEL for v in levels):
                raise InputError(f"--sweep serviceLevel: values must be <= {MAX_SERVICE_LEVEL:g}")
        elif key in ("maxError", "maxExceedance"):  # the policy fields' bounds
            top = MAX_GUARD_ERROR if key == "maxError" else 1.0
            got = _numbers(f"accuracyGuard.{key}", vals, parts, lo=0.0, lo_open=True)
            if any(v > top for v in got):
                raise InputError(f"--sweep accuracyGuard.{key}: values must be <= {top:g}")
            if key == "maxError":
                errors = [*got]
            else:
                exceeds = [*got]
        else:
            raise InputError(f"--sweep: unknown setting {key!r} (use {', '.join(SWEEP_KEYS)})")
    return [replay.Knobs(ld, h, hd, t, s, e, x)
            for ld in leads for h in heads for hd in holds for t in targets
            for s in levels for e in errors for x in exceeds]  # fmt: skip


def parse_ladder(text: str) -> tuple[float, ...]:
    """``--ladder 70,60,50,40`` (percent) -> target fractions for the HPA alone."""
    parts = [v.strip() for v in text.split(",") if v.strip()]
    try:
        pcts = [float(v) for v in parts]
    except ValueError:
        raise InputError(f"--ladder: not a number in {text!r}") from None
    if not pcts or any(not np.isfinite(p) or not 0 < p <= 1000 for p in pcts):
        raise InputError(f"--ladder: expected percentages in (0, 1000], got {text!r}")
    return tuple(p / 100.0 for p in pcts)


def live_summary(factor: np.ndarray) -> dict[str, Any]:
    """The floorcast row's live-correction factor over the replay (docs/cli.md)."""
    on = factor[~np.isnan(factor)]
    pct = (lambda q: float(np.percentile(on, q))) if len(on) else (lambda q: None)
    return {"active_share": float(len(on) / max(len(factor), 1)), "factor_p10": pct(10),
            "factor_median": pct(50), "factor_p90": pct(90)}  # fmt: skip


def _summary(r: replay.Result) -> dict[str, Any]:
    doc: dict[str, Any] = {
        "start": iso(r.start),
        "end": iso(r.end),
        "sync_seconds": r.sync.total_seconds(),
        "pod_startup": format_duration(r.pod_startup),
        "baseline": r.bounds.baseline,
        "ceiling": r.bounds.ceiling,
        "static_floor": r.static_floor,
    }
    for name in ("reactive", "static_peak", "floorcast"):
        doc[name] = r.scores[r.row(name)]
    doc["floorcast"] = {**doc["floorcast"], "forecast_error": r.forecast_error}
    doc["plan_step_seconds"] = r.plan_step.total_seconds()
    if r.live_factor is not None:
        doc["live_correction"] = live_summary(r.live_factor[0])
    if r.guard is not None and 0 in r.guard.rows:
        doc["accuracy_guard"] = replay_guard.summary(r.guard, r.guard.rows.index(0), r.sync)
    doc.update(tuned_summary(r))
    if r.sweep:
        doc["sweep"] = [
            {**row, "leadTime": format_duration(row["leadTime"].to_pytimedelta()),
             "holdTime": format_duration(row["holdTime"].to_pytimedelta())}
            for row in r.sweep
        ]  # fmt: skip
    return doc


@click.command("backtest", help=HELP)
@click.option("-f", "--filename", "policy_file", required=True, type=click.Path(path_type=Path),
              help="Policy YAML.")  # fmt: skip
@click.option("--history", required=True, type=click.Path(path_type=Path), help="History CSV/JSON.")
@click.option("--hpa", "hpa_file", default=None, type=click.Path(path_type=Path),
              help="The autoscaling/v2 HPA manifest the policy targets.")  # fmt: skip
@click.option(
    "--baseline", default=None, type=REPLICAS, help="HPA minReplicas [HPA or 1]."
)
@click.option("--hpa-max", default=None, type=REPLICAS,
              help="HPA maxReplicas [HPA, policy maxReplicas or 100].")  # fmt: skip
@click.option("--target-utilization", default=None, type=click.FloatRange(min=0, min_open=True),
              help="HPA CPU target in percent [HPA, or 80].")  # fmt: skip
@click.option("--per-replica", default=None, type=PER_REPLICA,
              help="Per-replica capacity, for a capacity.fromHPA policy.")  # fmt: skip
@click.option("--pod-startup", default=None, help="Time until a new pod serves [policy leadTime].")
@click.option("--forecast-method", default="auto",
              type=click.Choice(["auto", "seasonal-naive", "fourier", "holt-winters"]))  # fmt: skip
@click.option("--cadence", default="24h", show_default=True, help="Re-forecast every.",
              callback=duration(minimum=timedelta(minutes=1), maximum=timedelta(days=366)))
@click.option("--start", default=None, help="RFC 3339 start of the replay.")
@click.option("--end", default=None, help="RFC 3339 end of the replay.")
@click.option(
    "--sweep",
    multiple=True,
    help="e.g. leadTime=2m,5m headroom=0,0.1 holdTime=0,15m targetUtilization=70,85",
)
@click.option(
    "--ladder",
    default=None,
    help="HPA-alone targets in percent, e.g. 70,60,50,40 [target down to 10 in 5s].",
)
@click.option(
    "--plan-step",
    default=None,
    help="Grid the need is planned on [the HPA sync, 15s]; the forecast step plans as the "
    "operator does today.",
)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@click.option(
    "--report", default=None, type=click.Path(path_type=Path), help="Write an HTML report."
)
@click.argument("extra", nargs=-1)
def backtest(policy_file: Path, history: Path, hpa_file: Path | None, baseline: int | None,
             hpa_max: int | None, target_utilization: float | None, per_replica: float | None,
             pod_startup: str | None, forecast_method: str, cadence: str, start: str | None,
             end: str | None, sweep: tuple[str, ...], ladder: str | None,
             plan_step: str | None, as_json: bool, report: Path | None,
             extra: tuple[str, ...]) -> None:  # fmt: skip
    policy = load_policy_file(policy_file)
    spec = policy.spec
    hpa = load_hpa_file(hpa_file) if hpa_file is not None else None
    # --sweep leadTime=... headroom=... : the second word arrives as an argument.
    sweep_items = (*sweep, *extra)
    if any("=" not in x for x in extra):
        raise InputError(f"unexpected argument(s): {' '.join(extra)}")
    cap = per_replica if per_replica is not None else spec.capacity.per_replica
    if cap is None:
        raise InputError("capacity.fromHPA needs the pods' CPU requests; pass --per-replica")
    if cap <= 0:
        raise InputError(f"--per-replica must be > 0, got {cap}")
    target = (target_utilization / 100.0 if target_utilization is not None
              else hpa.target_utilization if hpa else 0.8)  # fmt: skip
    kw: dict[str, Any] = {}
    if hpa is not None:
        kw = {"scale_up": hpa.scale_up, "scale_down": hpa.scale_down}
    setup = replay.Setup(
        baseline=baseline or (hpa.min_replicas if hpa else 1),
        hpa_max=hpa_max or (hpa.max_replicas if hpa else (spec.max_replicas or 100)),
        target_utilization=target,
        per_replica=float(cap),
        pod_startup=parse_duration(pod_startup, field="--pod-startup") if pod_startup else None,
        method=forecast_method,
        cadence=parse_duration(cadence, field="--cadence"),
        start=parse_rfc3339(start, field="--start") if start else None,
        end=parse_rfc3339(end, field="--end") if end else None,
        ladder=parse_ladder(ladder) if ladder is not None else None,
        plan_step=pd.Timedelta(parse_duration(plan_step, field="--plan-step"))
        if plan_step
        else None,
        **kw,
    )
    own = replay.Knobs(spec.lead_time, spec.headroom, spec.hold_time, target)
    grid = parse_sweep(sweep_items, own) if sweep_items else []
    # Forward-fill short gaps, never interpolate: a straight line across a gap that
    # straddles a forecast origin would read a sample recorded after that origin (a
    # look-ahead); the last value seen is all a live forecaster would have had.
    hist = read_history(history, gap_fill=REPLAY_GAP_FILL)
    err = Console(stderr=True)
    if sys.stderr.isatty() and not as_json:
        # One bar over replay's phases (forecast, plan, simulate, measure): the work
        # inside each is one vectorized call, so finer ticks would be invented.
        with Progress(
            TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(),
            console=err, transient=True,
        ) as bar:  # fmt: skip
            task = bar.add_task("back-testing", total=replay.PHASES)

            def step(msg: str) -> None:
                bar.update(task, description=msg, advance=1)

            result = replay.run(spec, hist, setup, sweep=grid, progress=step)
    else:
        result = replay.run(spec, hist, setup, sweep=grid)
    name = f"{policy.namespace}/{policy.name}"
    if report is not None:
        from floorcast.cli.report import write_report

        write_report(result, report, title=name, target=target)
    if as_json:
        doc = {"policy": name, "target_utilization": target, **_summary(result)}
        click.echo(json.dumps(doc, indent=2))
        return
    print_summary(result, name, target, Console())
    if report is not None:
        err.print(f"report written to {report}")


def print_summary(r: replay.Result, name: str, target: float, console: Console) -> None:
    console.print(
        f"[bold]{name}[/bold]  {iso(r.start)} → {iso(r.end)}  HPA target {target:.0%}, "
        f"baseline {r.bounds.baseline}, ceiling {r.bounds.ceiling}, "
        f"pods serve {format_duration(r.pod_startup)} after creation"
    )
    t = Table("scenario", "under capacity (min)", "over target (min)", "replica-hours",
              "peak util.", "scale events")  # fmt: skip
    labels = {"reactive": "HPA alone", "static_peak": f"static floor {r.static_floor}",
              "floorcast": "HPA + floorcast",
              "oracle": "oracle: perfect foresight (reference only)"}  # fmt: skip
    for key in ("reactive", "static_peak", "floorcast", "oracle"):
        s = r.scores[r.row(key)]
        t.add_row(
            labels[key],
            f"{s['under_capacity_minutes']:.1f}",
            f"{s['over_target_minutes']:.1f}",
            f"{s['replica_hours']:.1f}",
            f"{s['peak_utilization']:.0%}",
            str(s["scale_events"]),
        )
    console.print(t)
    console.print(equal_saturation_line(r))
    e = r.forecast_error
    if e.get("mae") is not None:
        mase = f"{e['mase']:.2f}" if e["mase"] is not None else "n/a"
        console.print(
            f"forecasts: {e['forecasts']} ({', '.join(e['methods'])}), MAE {e['mae']:.3g}, "
            f"MASE {mase}, actual within upper band {e['upper_coverage']:.0%}"
        )
    if r.guard is not None and 0 in r.guard.rows:
        console.print(guard_line(replay_guard.summary(r.guard, r.guard.rows.index(0), r.sync)))
    if r.sweep:
        title = f"trade-off (pods start in {format_duration(r.pod_startup)} in every row)"
        guarded = any(row["accuracy_guard"] is not None for row in r.sweep)
        cols = ("maxError", "maxExceedance", "guard tripped") if guarded else ()
        st = Table("leadTime", "holdTime", "headroom", "HPA target", "serviceLevel", *cols,
                   "under capacity (min)", "replica-hours", "saving at equal saturation",
                   title=title)  # fmt: skip
        for row in r.sweep:
            lvl, g = row["serviceLevel"], row["accuracy_guard"]
            gc = (() if not guarded else ("off", "off", "") if g is None else
                  (f"{row['maxError']:g}", f"{row['maxExceedance']:g}",
                   f"{g['tripped_share']:.0%} ({g['trips']}×)"))  # fmt: skip
            st.add_row(format_duration(row["leadTime"].to_pytimedelta()),
                       format_duration(row["holdTime"].to_pytimedelta()), f"{row['headroom']:g}",
                       f"{row['target_utilization']:.0%}", "band" if lvl is None else f"{lvl:g}",
                       *gc, f"{row['under_capacity_minutes']:.1f}", f"{row['replica_hours']:.1f}",
                       saving_pct(row["saving_at_equal_saturation"],
                            row["equal_saturation_found"]))  # fmt: skip
        console.print(st)


def guard_line(g: dict[str, Any]) -> str:
    """The floorcast row's accuracy guard in one sentence (``replay_guard.summary``)."""
    w = g["without_guard"]
    spread = ("never judged" if g["error_p50"] is None else
              f"WAPE median {g['error_p50']:.0%}, p90 {g['error_p90']:.0%}; exceedance "
              f"median {g['exceedance_p50']:.0%}, p90 {g['exceedance_p90']:.0%}")  # fmt: skip
    return (f"accuracy guard: tripped {g['trips']}× ({g['tripped_share']:.0%} of the time), "
            f"judged {g['judged_share']:.0%}; {spread}; without it "
            f"{w['under_capacity_minutes']:.1f} min under capacity, "
            f"{w['replica_hours']:.1f} replica-hours")
