"""``floorcast demo``: the whole job on a built-in invented shop, with no setup.

Offline (``--offline``) it forecasts each service of the shop from its two weeks of
history with the forecasting engine, plans the next day's floors, back-tests the
policies on the history and writes an HTML report per service. Live (the default
from a source checkout) it does the same on a real local control plane with the
operator running; see ``demo_live``.

Why the live mode needs a source checkout: the local control plane is the e2e
harness (``e2e/controlplane``), which builds upstream binaries from Go modules and
is not part of the installed wheel. From a checkout (``make demo``) the demo imports
it; elsewhere the user passes ``--kubeconfig`` to a throw-away cluster or ``--offline``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import click
import numpy as np
from rich.console import Console
from rich.table import Table

from floorcast import replay, scenario
from floorcast.cli.plan import print_plan
from floorcast.core.series import Series
from floorcast.core.series_text import to_json_text
from floorcast.plans import FloorPlan, plan_policy
from floorcast.policy import load_policy_text
from floorcast.scenario import BASELINE, HPA_MAX, TARGET, forecast_shop, policy_text
from floorcast.timefmt import iso

HELP = (
    "Run floorcast on a built-in demo shop: on a local control plane with the operator "
    "(from a source checkout, or --kubeconfig), or --offline (forecast, plan, backtest)."
)


@dataclass
class OfflineResult:
    """What the offline run made, for the live run and the tests."""

    forecasts: dict[str, Series]
    plans: dict[str, FloorPlan]
    reports: dict[str, Path] = field(default_factory=dict)
    index: Path | None = None


def backtest_shop(out: Path, console: Console) -> dict[str, Path]:
    """Replay each service's history with its policy; one HTML report each."""
    from floorcast.cli.report import write_report

    reports: dict[str, Path] = {}
    for svc in scenario.SERVICES:
        policy = load_policy_text(policy_text(svc.name), source=f"{svc.name}.yaml")
        setup = replay.Setup(
            baseline=BASELINE,
            hpa_max=HPA_MAX,
            target_utilization=TARGET,
            per_replica=float(policy.spec.capacity.per_replica or svc.per_replica),
        )
        hist = scenario.history(svc.name, step="5min")
        with console.status(f"back-testing {svc.name} on two weeks of history"):
            result = replay.run(policy.spec, hist, setup)
        path = out / f"{svc.name}-backtest.html"
        write_report(result, path, title=f"shop/{svc.name}", target=TARGET)
        reports[svc.name] = path
        fc, re_ = result.scores[result.row("floorcast")], result.scores[result.row("reactive")]
        console.print(
            f"  {svc.name}: under-capacity minutes {re_['under_capacity_minutes']:.0f} "
            f"(HPA alone) → {fc['under_capacity_minutes']:.0f} (with floors), replica-hours "
            f"{re_['replica_hours']:.0f} → {fc['replica_hours']:.0f}"
        )
    return reports


def _index(out: Path, reports: dict[str, Path]) -> Path:
    links = "".join(f'<li><a href="{p.name}">{n}</a></li>' for n, p in reports.items())
    path = out / "index.html"
    path.write_text(
        "<!doctype html><meta charset='utf-8'><title>floorcast demo</title>"
        f"<h1>floorcast demo: back-test reports</h1><ul>{links}</ul>\n"
    )
    return path


def _summary(plans: dict[str, FloorPlan], console: Console) -> None:
    summary = Table(
        "service", "mode", "method", "peak floor", "changes", "floor replica-hours", "static peak"
    )
    for name, p in plans.items():
        floor = p.schedule.floor[0, : int(p.schedule.covered[0])]
        hours = p.schedule.step.total_seconds() / 3600.0
        summary.add_row(
            name,
            p.spec.mode,
            str(p.forecast.meta.get("method", "?")),
            str(int(floor.max())),
            str(len(p.changes)),
            f"{float(np.sum(floor)) * hours:.0f}",
            f"{int(floor.max()) * len(floor) * hours:.0f}",
        )
    console.rule("summary")
    console.print(summary)


def run_offline(
    out: Path, console: Console, *, plots: bool = True, backtest: bool = False
) -> dict[str, FloorPlan]:
    """Forecast and plan every demo service; returns the plans so tests can check them."""
    return run_offline_full(out, console, plots=plots, backtest=backtest).plans


def run_offline_full(
    out: Path, console: Console, *, plots: bool = True, backtest: bool = True
) -> OfflineResult:
    """Forecast → plan → (backtest + HTML reports) for the three services."""
    out.mkdir(parents=True, exist_ok=True)
    with console.status("forecasting the shop's three services from two weeks of history"):
        forecasts = forecast_shop()
    plans: dict[str, FloorPlan] = {}
    for svc in scenario.SERVICES:
        text = policy_text(svc.name)
        (out / f"{svc.name}-policy.yaml").write_text(text)
        (out / f"{svc.name}-history.csv").write_text(scenario.history_csv(svc.name, step="5min"))
        policy = load_policy_text(text, source=f"{svc.name}-policy.yaml")
        fc = forecasts[svc.name]
        (out / f"{svc.name}-forecast.json").write_text(to_json_text(fc))
        result = plan_policy(policy.spec, fc, baseline=BASELINE, hpa_max=HPA_MAX, at=fc.start)
        plans[svc.name] = result
        console.rule(f"{svc.name} — {svc.description}")
        print_plan(result, f"{policy.namespace}/{policy.name} ({policy.spec.mode})", console)
        if plots:
            from floorcast.cli.plots import plot_plan

            png = out / f"{svc.name}-plan.png"
            plot_plan(result, png, title=f"{svc.name}: forecast and replica floor")
    _summary(plans, console)
    res = OfflineResult(forecasts, plans)
    if backtest:
        console.rule("back-test: two weeks replayed through the reactive HPA")
        res.reports = backtest_shop(out, console)
        res.index = _index(out, res.reports)
    console.print(
        "A static minReplicas sized for the peak pays for the peak all day; the floor pays "
        "for it only around the peaks. Files are in "
        f"[bold]{out}[/bold] (forecasts from {iso(scenario.FORECAST_START)})."
    )
    if res.index is not None:
        console.print(f"Back-test reports: [bold]{res.index.resolve()}[/bold]")
    return res


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
@click.option("--offline", is_flag=True, help="No cluster: forecast, plan and backtest only.")
@click.option(
    "--kubeconfig",
    default=None,
    type=click.Path(path_type=Path),
    help="Run live on this (throw-away) cluster instead of a local control plane.",
)
@click.option("--duration", default="4m", show_default=True, help="Length of the live phase.")
def demo(
    output: Path, no_plots: bool, offline: bool, kubeconfig: Path | None, duration: str
) -> None:
    console = Console()
    if offline:
        run_offline_full(output, console, plots=not no_plots)
        return
    from floorcast.cli import demo_live

    demo_live.run_live(
        output, console, kubeconfig=kubeconfig, duration=duration, plots=not no_plots
    )
