"""Read the autoscaling/v2 HorizontalPodAutoscaler manifest a policy targets.

The back-test must replay the HPA the owner actually runs, so its bounds, CPU target
and ``behavior`` come from the same YAML ``kubectl apply`` takes. Field names, ranges
and defaults follow the autoscaling/v2 API reference (HorizontalPodAutoscalerSpec,
HPAScalingRules, HPAScalingPolicy; from memory) and the "Horizontal Pod Autoscaling"
page's "Default behavior" section; every mistake names the file and field.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import yaml

from floorcast.core.hpa_model import (
    DEFAULT_SCALE_DOWN,
    DEFAULT_SCALE_UP,
    ScalingPolicy,
    ScalingRules,
)
from floorcast.errors import InputError
from floorcast.sources.files import read_text

#: autoscaling/v2 HorizontalPodAutoscalerSpec.metrics: "If not set, the default metric
#: will be set to 80% average CPU utilization" (API reference, from memory).
DEFAULT_CPU_TARGET = 0.8


@dataclass(frozen=True)
class HpaSpec:
    name: str
    min_replicas: int
    max_replicas: int
    target_utilization: float  # fraction
    scale_up: ScalingRules
    scale_down: ScalingRules


def _fail(source: str, path: str, problem: str) -> InputError:
    return InputError(f"{path}: {problem}", source=source)


def _int(v: Any, source: str, path: str, lo: int, hi: int | None = None) -> int:
    if isinstance(v, bool) or not isinstance(v, int):
        raise _fail(source, path, f"expected an integer, got {v!r}")
    if v < lo or (hi is not None and v > hi):
        rng = f">= {lo}" if hi is None else f"between {lo} and {hi}"
        raise _fail(source, path, f"must be {rng}, got {v}")
    return v


def _map(v: Any, source: str, path: str) -> dict:
    if not isinstance(v, dict):
        raise _fail(source, path, f"expected a mapping, got {type(v).__name__}")
    return v


def _rules(v: Any, default: ScalingRules, source: str, path: str) -> ScalingRules:
    """Unset fields keep the documented defaults ([HPA doc] "Default behavior")."""
    if v is None:
        return default
    m = _map(v, source, path)
    unknown = set(m) - {"stabilizationWindowSeconds", "selectPolicy", "policies", "tolerance"}
    if unknown:
        raise _fail(source, f"{path}.{sorted(unknown)[0]}", "unknown field")
    out = default
    if m.get("stabilizationWindowSeconds") is not None:
        w = _int(
            m["stabilizationWindowSeconds"], source, f"{path}.stabilizationWindowSeconds", 0, 3600
        )
        out = replace(out, stabilization_window_seconds=w)
    if m.get("selectPolicy") is not None:
        sp = m["selectPolicy"]
        if sp not in ("Max", "Min", "Disabled"):
            raise _fail(source, f"{path}.selectPolicy", f"must be Max, Min or Disabled, got {sp!r}")
        out = replace(out, select_policy=sp)
    if m.get("tolerance") is not None:
        tol = m["tolerance"]
        if isinstance(tol, bool) or not isinstance(tol, int | float) or tol < 0:
            raise _fail(source, f"{path}.tolerance", f"must be a number >= 0, got {tol!r}")
        out = replace(out, tolerance=float(tol))
    if m.get("policies") is not None:
        pols = m["policies"]
        if not isinstance(pols, list) or not pols:
            raise _fail(source, f"{path}.policies", "must be a non-empty list")
        parsed = []
        for i, p in enumerate(pols):
            pp = f"{path}.policies[{i}]"
            p = _map(p, source, pp)
            kind = p.get("type")
            if kind not in ("Pods", "Percent"):
                raise _fail(source, f"{pp}.type", f"must be Pods or Percent, got {kind!r}")
            value = _int(p.get("value"), source, f"{pp}.value", 1)
            period = _int(p.get("periodSeconds"), source, f"{pp}.periodSeconds", 1, 1800)
            parsed.append(ScalingPolicy(kind, value, period))
        out = replace(out, policies=tuple(parsed))
    return out


def _cpu_target(metrics: Any, source: str) -> float:
    if metrics is None:
        return DEFAULT_CPU_TARGET
    if not isinstance(metrics, list) or not metrics:
        raise _fail(source, "spec.metrics", "must be a non-empty list")
    found = None
    for i, m in enumerate(metrics):
        m = _map(m, source, f"spec.metrics[{i}]")
        res = m.get("resource") or {}
        target = res.get("target") or {} if isinstance(res, dict) else {}
        if m.get("type") == "Resource" and res.get("name") == "cpu":
            if target.get("type") != "Utilization":
                raise _fail(
                    source,
                    f"spec.metrics[{i}].resource.target.type",
                    "the back-test models a CPU Utilization target; pass --target-utilization",
                )
            u = _int(target.get("averageUtilization"), source,
                     f"spec.metrics[{i}].resource.target.averageUtilization", 1)  # fmt: skip
            found = u / 100.0
    if found is None:
        raise _fail(
            source,
            "spec.metrics",
            "no CPU averageUtilization metric; the back-test models only that one "
            "(pass --target-utilization to model another metric as if it were)",
        )
    return found


def parse_hpa(doc: Any, *, source: str) -> HpaSpec:
    """One HPA document as a dict (already loaded from YAML)."""
    d = _map(doc, source, "document")
    if d.get("kind") != "HorizontalPodAutoscaler":
        raise _fail(source, "kind", f"expected HorizontalPodAutoscaler, got {d.get('kind')!r}")
    if d.get("apiVersion") != "autoscaling/v2":
        raise _fail(source, "apiVersion", f"expected autoscaling/v2, got {d.get('apiVersion')!r}")
    spec = _map(d.get("spec"), source, "spec")
    name = str(_map(d.get("metadata") or {}, source, "metadata").get("name") or "")
    mn = (
        1
        if spec.get("minReplicas") is None
        else _int(spec["minReplicas"], source, "spec.minReplicas", 1)
    )
    if spec.get("maxReplicas") is None:
        raise _fail(source, "spec.maxReplicas", "is required")
    mx = _int(spec["maxReplicas"], source, "spec.maxReplicas", 1)
    if mn > mx:
        raise _fail(source, "spec.minReplicas", f"{mn} is above maxReplicas {mx}")
    behavior = _map(spec.get("behavior") or {}, source, "spec.behavior")
    return HpaSpec(
        name=name,
        min_replicas=mn,
        max_replicas=mx,
        target_utilization=_cpu_target(spec.get("metrics"), source),
        scale_up=_rules(behavior.get("scaleUp"), DEFAULT_SCALE_UP, source, "spec.behavior.scaleUp"),
        scale_down=_rules(
            behavior.get("scaleDown"), DEFAULT_SCALE_DOWN, source, "spec.behavior.scaleDown"
        ),
    )


def load_hpa_file(path: str | Path) -> HpaSpec:
    """The first HorizontalPodAutoscaler in a (possibly multi-document) YAML file."""
    name = str(path)
    text = read_text(path)
    try:
        docs = [d for d in yaml.safe_load_all(text) if d is not None]
    except yaml.YAMLError as e:
        mark = getattr(e, "problem_mark", None)
        where = f"line {mark.line + 1}: " if mark is not None else ""
        raise InputError(f"{where}not valid YAML", source=name) from None
    hpas = [d for d in docs if isinstance(d, dict) and d.get("kind") == "HorizontalPodAutoscaler"]
    if not hpas:
        raise InputError("no HorizontalPodAutoscaler document in the file", source=name)
    return parse_hpa(hpas[0], source=name)
