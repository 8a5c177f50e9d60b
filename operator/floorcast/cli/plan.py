"""``floorcast plan``: preview the floor schedule a policy implies for a forecast file.

This is the engineer's first look before anything touches a cluster, so it runs on
files alone: ``--baseline`` and ``--hpa-max`` stand in for the live HPA.
"""

from __future__ import annotations

import json
from pathlib import Path

import click
import pandas as pd
from rich.console import Console
from rich.table import Table

from floorcast.cli.options import PER_REPLICA, REPLICAS
from floorcast.durations import format_duration
from floorcast.plans import FloorPlan, plan_policy, planning_label
from floorcast.policy import load_policy_file
from floorcast.sources.files import read_forecast
from floorcast.timefmt import iso, parse_rfc3339

HELP = "Preview the replica floor schedule a policy implies for a forecast."


def default_at(plan_start: pd.Timestamp, plan_end: pd.Timestamp, now: pd.Timestamp) -> pd.Timestamp:
    """The wall clock when the forecast covers it, else the forecast's first step.

    Previewing tomorrow's forecast today is the common case; failing because "now" is
    before the forecast would make the tool useless for it. The output always says
    which instant was used.
    """
    return now if plan_start <= now <= plan_end else plan_start


@click.command("plan", help=HELP)
@click.option(
    "-f",
    "--filename",
    "policy_file",
    required=True,
    type=click.Path(path_type=Path),
    help="Policy YAML (the document kubectl apply takes).",
)
@click.option(
    "--forecast", required=True, type=click.Path(path_type=Path), help="Forecast CSV or JSON."
)
@click.option("--at", default=None, help="RFC 3339 instant to plan from [now, or forecast start].")
@click.option(
    "--baseline",
    default=1,
    show_default=True,
    type=REPLICAS,
    help="The HPA's own minReplicas.",
)
@click.option(
    "--hpa-max",
    default=None,
    type=REPLICAS,
    help="The HPA's maxReplicas [policy maxReplicas or 100].",
)
@click.option(
    "--per-replica",
    default=None,
    type=PER_REPLICA,
    help="Per-replica capacity, to preview a capacity.fromHPA policy offline.",
)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON document on stdout.")
@click.option("--plot", default=None, type=click.Path(path_type=Path), help="Write a PNG.")
def plan(
    policy_file: Path,
    forecast: Path,
    at: str | None,
    baseline: int,
    hpa_max: int | None,
    per_replica: float | None,
    as_json: bool,
    plot: Path | None,
) -> None:
    policy = load_policy_file(policy_file)
    fc = read_forecast(forecast)
    spec = policy.spec
    hmax = hpa_max if hpa_max is not None else (spec.max_replicas or 100)
    if at is not None:
        t = parse_rfc3339(at, field="--at")
    else:
        t = default_at(fc.start, fc.end, pd.Timestamp.now(tz="UTC").floor("s"))
    result = plan_policy(spec, fc, baseline=baseline, hpa_max=hmax, at=t, per_replica=per_replica)
    if plot is not None:
        from floorcast.cli.plots import plot_plan

        plot_plan(result, plot, title=f"{policy.namespace}/{policy.name}")
    if as_json:
        doc = {"policy": f"{policy.namespace}/{policy.name}", **result.to_json()}
        click.echo(json.dumps(doc, indent=2))
        return
    print_plan(result, f"{policy.namespace}/{policy.name}", Console())
    if plot is not None:
        Console(stderr=True).print(f"plot written to {plot}")


def print_plan(result: FloorPlan, name: str, console: Console) -> None:
    """The human view: the floor now, then one row per change with its cause."""
    b = result.bounds
    console.print(
        f"[bold]{name}[/bold]  at {iso(result.at)}  floor now [bold]{result.floor_now}[/bold]"
        f"  (baseline {b.baseline}, lower {b.lower}, ceiling {b.ceiling},"
        f" {result.per_replica:g} per replica)"
    )
    console.print(f"sized on {planning_label(result.spec, result.forecast)}", markup=False)
    if result.spec.lead_time_auto is not None:  # nothing to measure without a cluster
        console.print(f"leadTime auto: planned with the fallback lead "
                      f"{format_duration(result.spec.lead_time)} (the operator measures the "
                      "target's Pods)", markup=False)  # fmt: skip
    if not result.changes:
        console.print("no floor changes within the forecast")
        return
    table = Table("at (UTC)", "floor", "change", "because of need at", "load")
    for c in result.changes:
        arrow = f"{c.old} → {c.new}"
        change = "[red]raise[/red]" if c.new > c.old else "[green]lower[/green]"
        cause = iso(c.cause_at) if c.cause_at is not None else "hold time ended"
        load = f"{c.cause_load:.3g}" if c.cause_load is not None else ""
        table.add_row(iso(c.at), arrow, change, cause, load)
    console.print(table)
