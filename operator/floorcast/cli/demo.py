"""``floorcast demo``: the whole job on a built-in invented shop, with no setup.

Today it runs offline: it writes the shop's forecasts and policies to a folder, plans
each service's floors for the next day, prints the schedules and writes one plot per
service, so a newcomer sees what floorcast would do before reading any docs.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import click
import numpy as np
from rich.console import Console
from rich.table import Table

from floorcast import scenario
from floorcast.cli.plan import print_plan
from floorcast.core.series import to_json_text
from floorcast.plans import FloorPlan, plan_policy
from floorcast.policy import load_policy_text
from floorcast.timefmt import iso

HELP = "Run floorcast on a built-in demo shop (offline: forecasts, plans, plots)."


def policy_text(service: str) -> str:
    """The bundled demo policy YAML for a service."""
    return (resources.files("floorcast") / "data" / "shop" / f"{service}.yaml").read_text()


def run_offline(out: Path, console: Console, *, plots: bool = True) -> dict[str, FloorPlan]:
    """Plan every demo service; returns the plans so tests can check them."""
    out.mkdir(parents=True, exist_ok=True)
    plans: dict[str, FloorPlan] = {}
    for svc in scenario.SERVICES:
        text = policy_text(svc.name)
        (out / f"{svc.name}-policy.yaml").write_text(text)
        policy = load_policy_text(text, source=f"{svc.name}-policy.yaml")
        fc = scenario.demo_forecast(svc.name)
        (out / f"{svc.name}-forecast.json").write_text(to_json_text(fc))
        result = plan_policy(policy.spec, fc, baseline=2, hpa_max=30, at=fc.start)
        plans[svc.name] = result
        console.rule(f"{svc.name} — {svc.description}")
        print_plan(result, f"{policy.namespace}/{policy.name} ({policy.spec.mode})", console)
        if plots:
            from floorcast.cli.plots import plot_plan

            png = out / f"{svc.name}-plan.png"
            plot_plan(result, png, title=f"{svc.name}: forecast and replica floor")
    summary = Table(
        "service", "mode", "peak floor", "changes", "floor replica-hours", "static peak"
    )
    for name, p in plans.items():
        floor = p.schedule.floor[0, : int(p.schedule.covered[0])]
        hours = p.forecast.step.total_seconds() / 3600.0
        summary.add_row(
            name,
            p.spec.mode,
            str(int(floor.max())),
            str(len(p.changes)),
            f"{float(np.sum(floor)) * hours:.0f}",
            f"{int(floor.max()) * len(floor) * hours:.0f}",
        )
    console.rule("summary")
    console.print(summary)
    console.print(
        "A static minReplicas sized for the peak pays for the peak all day; the floor pays "
        "for it only around the peaks. Files and plots are in "
        f"[bold]{out}[/bold] (forecasts from {iso(scenario.FORECAST_START)})."
    )
    return plans


@click.command("demo", help=HELP)
@click.option(
    "-o",
    "--output",
    default="floorcast-demo",
    show_default=True,
    type=click.Path(path_type=Path),
    help="Folder for the demo's files.",
)
@click.option("--no-plots", is_flag=True, help="Skip the PNG plots.")
def demo(output: Path, no_plots: bool) -> None:
    run_offline(output, Console(), plots=not no_plots)
