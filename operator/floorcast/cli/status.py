"""``floorcast status``: what the operator says about each policy, read from the cluster.

Read-only by construction: the only calls are the CustomObjects API's ``list`` and
``get`` on ForecastScalingPolicies, so a kubeconfig whose user may only get/list
them is enough (docs/cli.md, "`floorcast status`"). Everything a user can fix — a
kubeconfig that is missing or unreadable, an unknown context, a cluster without the
CRD, RBAC that forbids the list, an API server that cannot be reached — is one
stderr line and exit code 2 (``InputError``), like any other bad input.
"""

from __future__ import annotations

import json
import os
import re
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import click

from floorcast.cli.status_rows import rows, table
from floorcast.errors import InputError

HELP = ("Show every ForecastScalingPolicy's mode, floor, next change, forecast age, "
        "accuracy and last explanation (read-only: get/list only).")  # fmt: skip
#: Seconds per API request; a list page of 500 policies is well under a second.
REQUEST_TIMEOUT = 10.0
PAGE = 500
CRD = "forecastscalingpolicies.floorcast.dev"


def _default_kubeconfig() -> str:
    first = os.environ.get("KUBECONFIG", "").split(os.pathsep)[0]
    return os.path.expanduser(first or "~/.kube/config")


def connect(kubeconfig: str | None, context: str | None) -> tuple[Any, str | None]:
    """(ApiClient, the context's namespace) from ``--kubeconfig`` / ``$KUBECONFIG`` /
    ``~/.kube/config``, else in-cluster when no kubeconfig exists and no file was named."""
    import yaml
    from kubernetes import client as k8s
    from kubernetes import config as k8s_config

    path = kubeconfig or _default_kubeconfig()
    where = f"kubeconfig {path}"
    if not Path(path).exists():
        if kubeconfig is None and context is None and os.environ.get("KUBERNETES_SERVICE_HOST"):
            cfg = k8s.Configuration()
            try:
                k8s_config.load_incluster_config(client_configuration=cfg)
            except k8s_config.ConfigException as e:
                raise InputError(f"in-cluster config: {e}") from None
            ns_file = Path("/var/run/secrets/kubernetes.io/serviceaccount/namespace")
            ns = ns_file.read_text().strip() if ns_file.exists() else None
            return k8s.ApiClient(cfg), ns
        raise InputError(f"{where}: no such file (pass --kubeconfig PATH or set KUBECONFIG)")
    try:
        Path(path).read_bytes()
        contexts, active = k8s_config.list_kube_config_contexts(config_file=path)
        chosen = active
        if context is not None:
            chosen = next((c for c in contexts if c.get("name") == context), None)
            if chosen is None:
                names = ", ".join(sorted(str(c.get("name")) for c in contexts)) or "none"
                raise InputError(f"{where}: no context {context!r} (contexts: {names})")
        cfg = k8s.Configuration()
        k8s_config.load_kube_config(config_file=path, context=context, client_configuration=cfg,
                                    persist_config=False)  # fmt: skip
    except InputError:
        raise
    except OSError as e:
        raise InputError(f"{where}: cannot be read ({e.strerror or e})") from None
    except (k8s_config.ConfigException, yaml.YAMLError, ValueError, TypeError,
            AttributeError) as e:
        raise InputError(f"{where}: not a usable kubeconfig ({e})") from None
    ns = ((chosen or {}).get("context") or {}).get("namespace")
    return k8s.ApiClient(cfg), ns


def _status_body(e: Any) -> dict[str, Any]:
    try:
        body = json.loads(e.body or "")
    except (TypeError, ValueError):
        return {}
    return body if isinstance(body, dict) and body.get("kind") == "Status" else {}


def _api_error(e: Any, server: str, scope: str, name: str | None) -> InputError:
    """An ApiException as the one line a user can act on."""
    body = _status_body(e)
    said = " ".join(str(body.get("message") or e.reason or "").split())
    if e.status == 404 and name is not None and (body.get("details") or {}).get("name") == name:
        return InputError(f"no ForecastScalingPolicy {name!r} {scope} on {server}")
    if e.status == 404:
        return InputError(f"the ForecastScalingPolicy CRD ({CRD}) is not installed on {server}; "
                          "install crds/ or the chart first")  # fmt: skip
    if e.status == 403:
        return InputError(f"forbidden by {server}: {said} (floorcast status needs get and list "
                          f"on {CRD})")  # fmt: skip
    if e.status == 401:
        return InputError(f"{server} refused the kubeconfig's credentials (401 Unauthorized)")
    return InputError(f"{server} answered {e.status} {e.reason}: {said}")


def _why(e: BaseException) -> str:
    """urllib3's retry error wraps the cause in a long repr; the errno text is the news."""
    text = str(getattr(e, "reason", None) or e)
    m = re.search(r"\[Errno -?\d+\] [^\"')]+", text)
    return m.group(0) if m else f"{type(e).__name__}: {text}"


def fetch(api: Any, namespace: str | None, name: str | None) -> list[dict[str, Any]]:
    """The policies: ``get`` for one name in one namespace, else paged ``list`` calls
    (``namespace`` None: cluster-wide, ``name`` then a field selector)."""
    from kubernetes import client as k8s
    from kubernetes.client.rest import ApiException
    from urllib3.exceptions import HTTPError

    from floorcast.kube.policies import GROUP, PLURAL, VERSION

    custom = k8s.CustomObjectsApi(api)
    server = api.configuration.host
    scope = f"in namespace {namespace}" if namespace else "in any namespace"
    opts: dict[str, Any] = {"_request_timeout": REQUEST_TIMEOUT}
    try:
        if namespace and name:
            return [custom.get_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL, name,
                                                        **opts)]  # fmt: skip
        if name:
            opts["field_selector"] = f"metadata.name={name}"
        items: list[dict[str, Any]] = []
        token = None
        while True:
            page = {"limit": PAGE, **({"_continue": token} if token else {}), **opts}
            if namespace:
                doc = custom.list_namespaced_custom_object(GROUP, VERSION, namespace, PLURAL,
                                                           **page)  # fmt: skip
            else:
                doc = custom.list_cluster_custom_object(GROUP, VERSION, PLURAL, **page)
            items.extend(doc.get("items") or [])
            token = (doc.get("metadata") or {}).get("continue")
            if not token:
                break
    except ApiException as e:
        raise _api_error(e, server, scope, name) from None
    except (HTTPError, OSError) as e:
        raise InputError(f"cannot reach the API server at {server}: {_why(e)}") from None
    if name and not items:
        raise InputError(f"no ForecastScalingPolicy {name!r} {scope} on {server}")
    return items


@click.command("status", help=HELP)
@click.argument("name", required=False)
@click.option("--kubeconfig", type=click.Path(dir_okay=False), default=None,
              help="Kubeconfig to read [$KUBECONFIG, ~/.kube/config, then in-cluster].")
@click.option("--context", default=None, metavar="NAME", help="Kubeconfig context [current].")
@click.option("-n", "--namespace", default=None, metavar="NS",
              help="Namespace [the context's, else default].")
@click.option("-A", "--all-namespaces", is_flag=True, help="Every namespace.")
@click.option("--json", "as_json", is_flag=True, help="One JSON list instead of the table.")
def status(name: str | None, kubeconfig: str | None, context: str | None,
           namespace: str | None, all_namespaces: bool, as_json: bool) -> None:  # fmt: skip
    if all_namespaces and namespace:
        raise click.UsageError("--all-namespaces and --namespace exclude each other")
    now = datetime.now(UTC)  # once: every row is aged against the same instant
    api, context_ns = connect(kubeconfig, context)
    try:
        ns = None if all_namespaces else (namespace or context_ns or "default")
        found = rows(fetch(api, ns, name), now)
    finally:
        api.close()
    if as_json:
        click.echo(json.dumps(found, indent=2))
    elif found:
        click.echo(table(found), nl=False)
    else:
        where = f"namespace {ns}" if ns else "any namespace"
        click.echo(f"no ForecastScalingPolicies in {where}", err=True)
