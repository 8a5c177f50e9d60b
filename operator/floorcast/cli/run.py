"""`floorcast run`: the operator, with every setting as a flag (see controller/settings.py)."""

from __future__ import annotations

import click

from floorcast.cli.options import CONNECTIONS, PORT
from floorcast.durations import parse_duration
from floorcast.errors import InputError


def _interval(value: str, flag: str = "--interval") -> float:
    try:
        return parse_duration(value, field=flag).total_seconds()
    except InputError as e:
        raise click.BadParameter(e.problem) from None


@click.command("run", help="Run the operator (kopf) against the current cluster.")
@click.option("--dry-run", is_flag=True,
              help="Operator-wide: never raise a floor (one raised earlier is still restored).")
@click.option(
    "--namespace",
    "namespaces",
    multiple=True,
    metavar="NS",
    help="Watch this namespace (repeatable).",
)
@click.option("--all-namespaces", is_flag=True, help="Watch every namespace (the default).")
@click.option("--interval", default="10m", show_default=True,
              help="Safety-net resync: the longest a policy goes unreconciled when nothing "
              "wakes it (policies wake at their planned changes and on input changes).")
@click.option("--observe-interval", default="30s", show_default=True,
              help="How often a policy with liveCorrection observes its HPA's load, and how "
              "often a forecast no watch reports (URL, unlabelled ConfigMap) is read.")
@click.option(
    "--allow-url-host",
    "hosts",
    multiple=True,
    metavar="HOST|URL",
    help="A host forecast URLs may use, or https://host[:port]/prefix to pin scheme, port "
    "and path prefix (repeatable); none by default.",
)
@click.option(
    "--metrics-port",
    type=PORT,
    default=8080,
    show_default=True,
    help="Prometheus metrics port (0: off).",
)
@click.option(
    "--liveness-port",
    type=PORT,
    default=8081,
    show_default=True,
    help="Liveness endpoint /healthz port (0: off).",
)
@click.option(
    "--log-format", type=click.Choice(["text", "json"]), default="text", show_default=True
)
@click.option("--kubeconfig", type=click.Path(dir_okay=False), default=None,
              help="Kubeconfig to use (default: in-cluster, then ~/.kube/config).")  # fmt: skip
@click.option(
    "--leader-elect",
    "lease_name",
    default=None,
    metavar="LEASE",
    help="Run several replicas: only the holder of this coordination.k8s.io Lease "
    "acts, the others wait on standby. Default: standalone (one replica).",
)
@click.option(
    "--leader-elect-namespace",
    "lease_namespace",
    default=None,
    metavar="NS",
    help="The Lease's namespace (default: $POD_NAMESPACE, else the first "
    "--namespace, else default).",
)
@click.option(
    "--identity",
    default=None,
    metavar="ID",
    help="This replica's name in the Lease (default: hostname-pid).",
)
@click.option("--https-only", is_flag=True, help="Refuse plain-http forecast URLs.")
@click.option("--ca-bundle", type=click.Path(dir_okay=False, exists=True), default=None,
              help="PEM file of CAs trusted for https forecast URLs [system store].")
@click.option("--prometheus-url", default=None, metavar="URL",
              help="Prometheus-compatible server that policies' observedLoad.prometheusQuery "
              "is sent to (instant queries); none by default.")
@click.option(
    "--max-api-connections",
    type=CONNECTIONS,
    default=16,
    show_default=True,
    help="kopf's connections to the API server besides one per watch stream; bounds "
    "memory during the start-up flood.",
)
def run(dry_run: bool, namespaces: tuple[str, ...], all_namespaces: bool, interval: str,
        observe_interval: str,
        hosts: tuple[str, ...], metrics_port: int, liveness_port: int, log_format: str,
        kubeconfig: str | None, lease_name: str | None, lease_namespace: str | None,
        identity: str | None, https_only: bool, ca_bundle: str | None,
        prometheus_url: str | None, max_api_connections: int) -> None:  # fmt: skip
    from floorcast.controller.app import run as run_operator
    from floorcast.controller.settings import Settings, parse_url_rule

    if all_namespaces and namespaces:
        raise click.UsageError("--all-namespaces and --namespace exclude each other")
    if (lease_namespace or identity) and not lease_name:
        raise click.UsageError("--leader-elect-namespace and --identity need --leader-elect")
    for h in hosts:
        try:
            parse_url_rule(h)
        except InputError as e:
            raise click.BadParameter(e.problem.split(": ", 1)[-1],
                                     param_hint="--allow-url-host") from None
    seconds = _interval(interval)
    if seconds < 1:
        raise click.BadParameter("must be at least 1s", param_hint="--interval")
    observe = _interval(observe_interval, "--observe-interval")
    if prometheus_url is not None:
        from floorcast.sources.prometheus_instant import query_url

        try:
            query_url(prometheus_url)
        except InputError as e:
            raise click.BadParameter(e.problem, param_hint="--prometheus-url") from None
    if observe < 1:
        raise click.BadParameter("must be at least 1s", param_hint="--observe-interval")
    run_operator(Settings(
        namespaces=tuple(namespaces), interval_seconds=seconds,
        observe_interval_seconds=observe, allowed_url_hosts=tuple(hosts),
        dry_run=dry_run, metrics_port=metrics_port or None, liveness_port=liveness_port or None,
        log_format=log_format, kubeconfig=kubeconfig, lease_name=lease_name,
        lease_namespace=lease_namespace, identity=identity,
        max_api_connections=max_api_connections, https_only=https_only, ca_bundle=ca_bundle,
        prometheus_url=prometheus_url,
    ))  # fmt: skip
