"""The ``ForecastScalingPolicy`` model: parsed and validated once, trusted everywhere after.

The CLI reads the YAML ``kubectl apply`` takes, the operator gets the object from the API
server as a dict; both go through ``parse_policy``, so a policy that previews cleanly with
``floorcast plan`` behaves the same once applied. A typo here silently changes production
capacity, so validation is strict and names the file and field (``spec.headroom``).

Decisions (the CRD schema mirrors them):

* ``leadTime`` and ``forecast.maxAge`` must be > 0 (a floor raised with no lead cannot
  serve in time; a zero max age rejects every forecast); ``holdTime`` may be ``0s``
  (drop the floor once the need has passed); zero is ``0s``, as DURATION_PATTERN wants.
* ``targetRef`` may carry ``kind: HorizontalPodAutoscaler`` / ``apiVersion:
  autoscaling/v2``, as generated object references do; anything else is rejected.
* An explicit ``null`` for an optional field means "not set", as with ``kubectl apply``.
* YAML timestamps stay strings, so event times are RFC 3339 with an offset whether they
  came from a file or the API server; duplicate YAML keys are errors, not last-wins.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import timedelta
from pathlib import Path
from typing import Any, Literal, cast
from urllib.parse import urlsplit

import pandas as pd
import yaml

from floorcast.durations import format_duration
from floorcast.policy_fields import (  # noqa: F401  (MAX_* and PolicyError re-exported)
    _M,
    MAX_CORRECTION,
    MAX_DURATION,
    MAX_DURATION_LENGTH,
    MAX_EVENT_NAME_LENGTH,
    MAX_EVENTS,
    MAX_FACTOR,
    MAX_HEADROOM,
    MAX_PER_REPLICA,
    MAX_REPLICAS,
    MAX_SERVICE_LEVEL,
    MAX_TIME_LENGTH,
    MAX_URL_LENGTH,
    MIN_SERVICE_LEVEL,
    PolicyError,
    _describe,
    _Reader,
    _Rule,
)
from floorcast.policy_guard import AccuracyGuard, guard_defaults, read_guard
from floorcast.policy_observe import ObservedLoad, read_observed_load

API_VERSION = "floorcast.dev/v1alpha1"
KIND = "ForecastScalingPolicy"
Mode = Literal["DryRun", "Enforce"]
MODES: tuple[Mode, ...] = ("DryRun", "Enforce")

DEFAULT_MAX_AGE = timedelta(hours=6)
DEFAULT_LEAD_TIME = timedelta(minutes=5)
#: 0: the HPA's own scale-down stabilization (5 minutes by default) already holds the
#: pods after a peak; on the back-test's frontier a hold on the floor on top of it
#: cost replica-hours for no less saturation (docs/backtest.md, "holdTime").
DEFAULT_HOLD_TIME = timedelta(0)
DEFAULT_HEADROOM = 0.1
DEFAULT_USE_UPPER_BOUND = True
DEFAULT_MODE: Mode = "DryRun"
#: Live correction (docs/policy.md, "Live correction"); the choice of each default is
#: measured in docs/backtest.md.
DEFAULT_CORRECTION_ENABLED = False
DEFAULT_CORRECTION_HALF_LIFE = timedelta(minutes=30)
DEFAULT_CORRECTION_MIN = 0.5
DEFAULT_CORRECTION_MAX = 2.0
DEFAULT_NAMESPACE = "default"
#: ``leadTime: auto`` (docs/policy.md, "Measured lead time"): the lead is the measured
#: pod start-up + margin, clamped to [min, max]. A 30 s margin covers one default
#: readiness-probe period (10 s) three times over (common practice, no source); 15m
#: as the default ceiling keeps a slow start-up from planning a quarter-hour ahead
#: unasked.
LEAD_TIME_AUTO = "auto"
DEFAULT_LEAD_AUTO_MARGIN = timedelta(seconds=30)
DEFAULT_LEAD_AUTO_MIN = timedelta(seconds=30)
DEFAULT_LEAD_AUTO_MAX = timedelta(minutes=15)

# ObjectMeta fields, so a manifest exported with ``kubectl get -o yaml`` still parses.
_METADATA_FIELDS = (
    "name", "namespace", "uid", "generation", "labels", "annotations", "resourceVersion",
    "creationTimestamp", "deletionTimestamp", "deletionGracePeriodSeconds", "finalizers",
    "ownerReferences", "managedFields", "generateName", "selfLink",
)  # fmt: skip
_SPEC_FIELDS = (
    "targetRef", "forecast", "capacity", "leadTime", "holdTime", "headroom",
    "useUpperBound", "minReplicas", "maxReplicas", "mode", "plannedEvents", "liveCorrection",
    "serviceLevel", "accuracyGuard",
    "leadTimeAuto", "observedLoad",
)  # fmt: skip
_DNS_SUBDOMAIN = re.compile(r"^[a-z0-9]([-a-z0-9]*[a-z0-9])?(\.[a-z0-9]([-a-z0-9]*[a-z0-9])?)*$")
_DNS_LABEL = re.compile(r"^[a-z0-9]([-a-z0-9]*[a-z0-9])?$")
_CONFIGMAP_KEY = re.compile(r"^[-._a-zA-Z0-9]+$")
@dataclass(frozen=True)
class ConfigMapRef:
    name: str
    key: str


@dataclass(frozen=True)
class ForecastSource:
    """Exactly one of the two sources is set; a forecast older than ``max_age`` is missing."""

    config_map_ref: ConfigMapRef | None
    url: str | None
    max_age: timedelta = DEFAULT_MAX_AGE


@dataclass(frozen=True)
class Capacity:
    per_replica: float | None
    from_hpa: bool


@dataclass(frozen=True)
class PlannedEvent:
    """A known window; ``start``/``end`` are UTC so the planner never mixes offsets."""

    name: str
    start: pd.Timestamp
    end: pd.Timestamp
    factor: float


@dataclass(frozen=True)
class LiveCorrection:
    """Scale the forecast for the next lead + hold window by the smoothed ratio of the
    load the HPA reports to the forecast (``core.correction``), clamped to [low, high]."""

    enabled: bool = DEFAULT_CORRECTION_ENABLED
    half_life: timedelta = DEFAULT_CORRECTION_HALF_LIFE
    low: float = DEFAULT_CORRECTION_MIN
    high: float = DEFAULT_CORRECTION_MAX


@dataclass(frozen=True)
class LeadTimeAuto:
    """``leadTime: auto``: lead = clamp(measured start-up + margin, low, high); while
    too few Pods were measured, clamp(the default leadTime, low, high)."""

    margin: timedelta = DEFAULT_LEAD_AUTO_MARGIN
    low: timedelta = DEFAULT_LEAD_AUTO_MIN
    high: timedelta = DEFAULT_LEAD_AUTO_MAX


@dataclass(frozen=True)
class PolicySpec:
    target_name: str
    forecast: ForecastSource
    capacity: Capacity
    lead_time: timedelta = DEFAULT_LEAD_TIME
    hold_time: timedelta = DEFAULT_HOLD_TIME
    headroom: float = DEFAULT_HEADROOM
    use_upper_bound: bool = DEFAULT_USE_UPPER_BOUND
    #: The probability the floor covers demand: which forecast quantile it is sized
    #: on (docs/policy.md, "serviceLevel"); None plans as ``useUpperBound`` says.
    service_level: float | None = None
    min_replicas: int | None = None
    max_replicas: int | None = None
    mode: Mode = DEFAULT_MODE
    planned_events: tuple[PlannedEvent, ...] = ()
    live_correction: LiveCorrection = LiveCorrection()
    accuracy_guard: AccuracyGuard = AccuracyGuard()  # noqa: RUF009 (frozen)
    #: Set for ``leadTime: auto``; ``lead_time`` then holds the fallback lead, which
    #: the operator replaces with the measured one (controller/leadtime.py).
    lead_time_auto: LeadTimeAuto | None = None
    #: Where the observed load comes from (policy_observe.py): the HPA's status or a query.
    observed_load: ObservedLoad = ObservedLoad()  # noqa: RUF009 (frozen)


@dataclass(frozen=True)
class Policy:
    """``generation`` and ``uid`` come only from the API server (observedGeneration, events)."""

    name: str
    namespace: str
    spec: PolicySpec
    generation: int | None = None
    uid: str | None = None


def spec_defaults() -> dict[str, Any]:
    """The defaults in CRD-schema shape, so a test can hold the CRD and this module together."""
    return {
        "forecast": {"maxAge": format_duration(DEFAULT_MAX_AGE)},
        "leadTime": format_duration(DEFAULT_LEAD_TIME),
        "holdTime": format_duration(DEFAULT_HOLD_TIME),
        "headroom": DEFAULT_HEADROOM,
        "useUpperBound": DEFAULT_USE_UPPER_BOUND,
        "mode": DEFAULT_MODE,
        "liveCorrection": {
            "enabled": DEFAULT_CORRECTION_ENABLED,
            "halfLife": format_duration(DEFAULT_CORRECTION_HALF_LIFE),
            "min": DEFAULT_CORRECTION_MIN,
            "max": DEFAULT_CORRECTION_MAX,
        },
        "accuracyGuard": guard_defaults(),
        "leadTimeAuto": {
            "margin": format_duration(DEFAULT_LEAD_AUTO_MARGIN),
            "min": format_duration(DEFAULT_LEAD_AUTO_MIN),
            "max": format_duration(DEFAULT_LEAD_AUTO_MAX),
        },
    }


_NAME: _Rule = (_DNS_SUBDOMAIN, "a Kubernetes object name (lower-case letters, digits, '-', '.')")


def parse_spec(spec: _M, *, source: str = "policy") -> PolicySpec:
    """Validate a bare ``spec``, for operator handlers that only hold the spec."""
    r = _Reader(source)
    s = r.mapping(spec, "spec", _SPEC_FIELDS)
    target = r.child(s, tp := "spec.targetRef", ("name", "kind", "apiVersion"))
    for key, only in (("kind", "HorizontalPodAutoscaler"), ("apiVersion", "autoscaling/v2")):
        if target.get(key) is not None and target[key] != only:
            r.fail(f"{tp}.{key}", f"got {_describe(target[key])}; only {only!r} is supported")
    low = r.integer(s, "spec.minReplicas", minimum=1)
    high = r.integer(s, "spec.maxReplicas", minimum=1)
    if low is not None and high is not None and high < low:
        r.fail("spec.maxReplicas", f"{high} is less than spec.minReplicas ({low}); "
                                   "expected maxReplicas >= minReplicas")  # fmt: skip
    mode = DEFAULT_MODE if s.get("mode") is None else s["mode"]
    if mode not in MODES:
        near = [m for m in MODES if isinstance(mode, str) and m.lower() == mode.lower()]
        hint = f" (did you mean {near[0]!r}? case matters)" if near else ""
        r.fail("spec.mode", f"got {_describe(mode)}{hint}; expected one of {', '.join(MODES)}")
    auto = _lead_time_auto(r, s)
    return PolicySpec(
        target_name=r.string(target, f"{tp}.name", _NAME),
        forecast=_forecast(r, s),
        capacity=_capacity(r, s),
        lead_time=(_auto_fallback(auto) if auto else
                   r.duration(s, "spec.leadTime", default=DEFAULT_LEAD_TIME, allow_zero=False)),
        hold_time=r.duration(s, "spec.holdTime", default=DEFAULT_HOLD_TIME, allow_zero=True),
        headroom=r.number(s, "spec.headroom", above=0, inclusive=True, maximum=MAX_HEADROOM,
                          default=DEFAULT_HEADROOM),
        use_upper_bound=r.boolean(s, "spec.useUpperBound", DEFAULT_USE_UPPER_BOUND),
        service_level=r.number(s, "spec.serviceLevel", above=MIN_SERVICE_LEVEL, inclusive=True,
                               maximum=MAX_SERVICE_LEVEL, default=None),
        min_replicas=low,
        max_replicas=high,
        mode=cast(Mode, mode),
        planned_events=_events(r, s.get("plannedEvents"), "spec.plannedEvents"),
        live_correction=_live_correction(r, s),
        accuracy_guard=read_guard(r, s),
        lead_time_auto=auto,
        observed_load=read_observed_load(r, s),
    )


def _auto_fallback(auto: LeadTimeAuto) -> timedelta:
    """The lead while too few Pods were measured: the default, within the bounds."""
    return min(max(DEFAULT_LEAD_TIME, auto.low), auto.high)


def _lead_time_auto(r: _Reader, s: _M) -> LeadTimeAuto | None:
    """``leadTime: auto`` with its optional ``leadTimeAuto`` block; the block without
    ``auto`` is a mistake (it would silently do nothing)."""
    p = "spec.leadTimeAuto"
    if s.get("leadTime") != LEAD_TIME_AUTO:
        if s.get("leadTimeAuto") is not None:
            r.fail(p, "applies only with spec.leadTime: auto")
        return None
    c = r.child(s, p, ("margin", "min", "max")) if s.get("leadTimeAuto") is not None else {}
    auto = LeadTimeAuto(
        margin=r.duration(c, f"{p}.margin", default=DEFAULT_LEAD_AUTO_MARGIN, allow_zero=True),
        low=r.duration(c, f"{p}.min", default=DEFAULT_LEAD_AUTO_MIN, allow_zero=False),
        high=r.duration(c, f"{p}.max", default=DEFAULT_LEAD_AUTO_MAX, allow_zero=False),
    )
    if auto.high < auto.low:
        r.fail(f"{p}.max", f"{format_duration(auto.high)} is less than {p}.min "
                           f"({format_duration(auto.low)}); expected max >= min")  # fmt: skip
    return auto


def _live_correction(r: _Reader, s: _M) -> LiveCorrection:
    if s.get("liveCorrection") is None:
        return LiveCorrection()
    c = r.child(s, p := "spec.liveCorrection", ("enabled", "halfLife", "min", "max"))
    return LiveCorrection(
        enabled=r.boolean(c, f"{p}.enabled", DEFAULT_CORRECTION_ENABLED),
        half_life=r.duration(
            c, f"{p}.halfLife", default=DEFAULT_CORRECTION_HALF_LIFE, allow_zero=False
        ),
        low=r.number(c, f"{p}.min", above=0, maximum=1, default=DEFAULT_CORRECTION_MIN),
        high=r.number(
            c, f"{p}.max", above=1, maximum=MAX_CORRECTION, inclusive=True,
            default=DEFAULT_CORRECTION_MAX,
        ),
    )


def _forecast(r: _Reader, s: _M) -> ForecastSource:
    f = r.child(s, p := "spec.forecast", ("configMapRef", "url", "maxAge"))
    ref = None
    if f.get("configMapRef") is not None:
        c = r.child(f, cp := f"{p}.configMapRef", ("name", "key"))
        key_rule = (_CONFIGMAP_KEY, "a ConfigMap key (letters, digits, '-', '_', '.')")
        ref = ConfigMapRef(r.string(c, f"{cp}.name", _NAME), r.string(c, f"{cp}.key", key_rule))
    url = r.string(f, f"{p}.url", default=None, max_length=MAX_URL_LENGTH)
    if url is not None:
        try:
            parts = urlsplit(url)
            usable = parts.scheme in ("http", "https") and bool(parts.hostname)
        except ValueError:
            usable = False
        if not usable:
            r.fail(f"{p}.url", f"{url!r} is not usable; expected an http(s):// URL with a host")
    if (ref is None) == (url is None):
        r.fail(p, f"set exactly one of configMapRef or url, not {'both' if ref else 'neither'}")
    max_age = r.duration(f, f"{p}.maxAge", default=DEFAULT_MAX_AGE, allow_zero=False)
    return ForecastSource(config_map_ref=ref, url=url, max_age=max_age)


def _capacity(r: _Reader, s: _M) -> Capacity:
    c = r.child(s, p := "spec.capacity", ("perReplica", "fromHPA"))
    per_replica = r.number(c, f"{p}.perReplica", above=0, maximum=MAX_PER_REPLICA,
                           default=None)
    from_hpa = r.boolean(c, f"{p}.fromHPA", False)
    if (per_replica is not None) == from_hpa:
        which = "both" if from_hpa else "neither"
        r.fail(p, f"set exactly one of perReplica (a number > 0) or fromHPA: true, not {which}")
    return Capacity(per_replica=per_replica, from_hpa=from_hpa)


def _events(r: _Reader, value: object, p: str) -> tuple[PlannedEvent, ...]:
    if value is None:
        return ()
    if not isinstance(value, list | tuple):
        r.fail(p, f"expected a list of events, got {_describe(value)}")
    if len(value) > MAX_EVENTS:
        r.fail(p, f"has {len(value)} events; at most {MAX_EVENTS} allowed")
    events: list[PlannedEvent] = []
    seen: dict[str, int] = {}
    for i, item in enumerate(value):
        e = r.mapping(item, ep := f"{p}[{i}]", ("name", "start", "end", "factor"))
        name = r.string(e, f"{ep}.name", max_length=MAX_EVENT_NAME_LENGTH)
        if name in seen:
            r.fail(f"{ep}.name", f"{name!r} is already used by {p}[{seen[name]}]; "
                                 "event names must be unique")  # fmt: skip
        seen[name] = i
        start, end = r.timestamp(e, f"{ep}.start"), r.timestamp(e, f"{ep}.end")
        if end <= start:
            r.fail(f"{ep}.end", f"{end.isoformat()} is not after start {start.isoformat()}; "
                                "expected end > start")  # fmt: skip
        factor = r.number(e, f"{ep}.factor", above=0, maximum=MAX_FACTOR)
        events.append(PlannedEvent(name=name, start=start, end=end, factor=factor))
    return tuple(events)


def parse_policy(doc: _M, *, source: str = "policy") -> Policy:
    """The one entry point for a whole object, whether from a file or from the API server."""
    r = _Reader(source)
    d = r.mapping(doc, "", ("apiVersion", "kind", "metadata", "spec", "status"))
    for key, expected in (("apiVersion", API_VERSION), ("kind", KIND)):
        if d.get(key) != expected:
            r.fail(key, f"got {_describe(d.get(key))}; expected {expected!r}")
    meta = r.child(d, "metadata", _METADATA_FIELDS)
    ns_rule = (_DNS_LABEL, "a namespace name (lower-case letters, digits, '-')")
    return Policy(
        name=r.string(meta, "metadata.name", _NAME),
        namespace=r.string(meta, "metadata.namespace", ns_rule, DEFAULT_NAMESPACE),
        spec=parse_spec(r.take(d, "spec"), source=source),
        generation=r.integer(meta, "metadata.generation", minimum=0),
        uid=r.string(meta, "metadata.uid", default=None),
    )


class _Loader(yaml.SafeLoader):
    """Safe YAML that keeps timestamps as text and refuses duplicate keys."""


_Loader.yaml_implicit_resolvers = {
    first: [(tag, rx) for tag, rx in resolvers if tag != "tag:yaml.org,2002:timestamp"]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}


def _construct_mapping(loader: _Loader, node: yaml.MappingNode) -> dict[Any, Any]:
    seen: set[tuple[str, str]] = set()
    for key, _ in node.value:
        if isinstance(key, yaml.ScalarNode) and key.value != "<<":
            if (key.tag, key.value) in seen:
                problem = f"duplicate key {key.value!r}"
                raise yaml.constructor.ConstructorError(None, None, problem, key.start_mark)
            seen.add((key.tag, key.value))
    return loader.construct_mapping(node)


_Loader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_mapping)


def load_policy_text(text: str, *, source: str) -> Policy:
    """Pick the policy out of a manifest, which may also hold the HPA and friends."""
    try:
        docs = [d for d in yaml.load_all(text, Loader=_Loader) if d is not None]
    except yaml.YAMLError as e:
        mark = getattr(e, "problem_mark", None)
        line = mark.line + 1 if mark else None
        problem = getattr(e, "problem", None) or e
        raise PolicyError(f"invalid YAML: {problem}", source=source, line=line) from None
    for i, d in enumerate(docs, start=1):
        if not isinstance(d, Mapping):
            raise PolicyError(f"document {i} is {_describe(d)}; expected a mapping", source=source)
    found = [d for d in docs if d.get("kind") == KIND]
    if len(found) != 1:
        kinds = ", ".join(str(d.get("kind")) for d in docs) or "none"
        raise PolicyError(f"expected exactly one {KIND} document, found {len(found)} "
                          f"(kinds: {kinds})", source=source)  # fmt: skip
    return parse_policy(found[0], source=source)


def load_policy_file(path: str | Path) -> Policy:
    """Read a policy file for the CLI, turning file-system trouble into bad input (exit 2)."""
    source = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except FileNotFoundError:
        raise PolicyError("policy file not found", source=source) from None
    except UnicodeDecodeError:
        raise PolicyError("policy file is not UTF-8 text", source=source) from None
    except OSError as e:
        raise PolicyError(f"cannot read policy file: {e.strerror or e}", source=source) from None
    return load_policy_text(text, source=source)
