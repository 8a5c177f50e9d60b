"""A real, throw-away Prometheus server holding known synthetic history.

The Prometheus source is tested against the real thing (Debian's ``prometheus``
package, unpacked into the cache by ``tests/prometheus_install.py``, which ``make
test`` runs first) rather than a hand-written stub, because the behaviour that
matters (the point limit, error bodies, how a range query picks samples) is exactly
what a stub would get wrong. History is backfilled with ``promtool tsdb
create-blocks-from openmetrics`` into a fresh data directory, then a server is started
on a free loopback port with no scrape targets, so the only data it has is ours.
"""

from __future__ import annotations

import contextlib
import math
import os
import socket
import subprocess
import tempfile
import time
import urllib.error
import urllib.request
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import prometheus_install

INSTALL_HINT = "run `make prometheus` (unpacks Debian's prometheus package into the cache)"
METRIC = "demo_load"
SERVICES = ("storefront", "search", "reports")
STEP_S = 60  # one sample a minute
DAYS = 2
READY_TIMEOUT_S = 60.0


class HarnessError(RuntimeError):
    """The test server could not be set up; the message says what to do."""


def binaries() -> tuple[str, str]:
    """Paths of ``prometheus`` and ``promtool``; a missing one is a setup failure, never
    a skip, so CI cannot go green without having run these tests."""
    pair = prometheus_install.found()
    if pair is None:
        where = prometheus_install.cache_dir()
        raise HarnessError(f"prometheus and promtool not found in {where} or on PATH; "
                           f"{INSTALL_HINT}")  # fmt: skip
    return pair


def synthetic_value(service_index: int, t: int) -> float:
    """A daily sine plus a service offset: many significant digits, so an exact
    round trip is a real check and not luck with round numbers."""
    day = 2 * math.pi * (t % 86_400) / 86_400
    return 3.0 + service_index + 1.234567891 * math.sin(day) + 1e-7 * (t % 977)


@dataclass
class History:
    """What was backfilled: one series per service on a shared 1-minute grid."""

    start: int  # unix seconds of the first sample
    end: int  # unix seconds of the last sample
    step: int = STEP_S
    values: dict[str, list[float]] = field(default_factory=dict)

    @property
    def times(self) -> range:
        return range(self.start, self.end + 1, self.step)


def make_history(end: int, days: int = DAYS) -> History:
    start = end - days * 86_400
    hist = History(start=start, end=end)
    for i, svc in enumerate(SERVICES):
        hist.values[svc] = [synthetic_value(i, t) for t in hist.times]
    return hist


def write_openmetrics(path: Path, hist: History) -> None:
    """OpenMetrics text exposition: a gauge family, one line per sample with a unix-
    seconds timestamp, series kept together, terminated by the mandatory ``# EOF``."""
    lines = [f"# HELP {METRIC} Synthetic load for floorcast tests.", f"# TYPE {METRIC} gauge"]
    for svc, values in hist.values.items():
        lines += [
            f'{METRIC}{{service="{svc}"}} {v!r} {t}'
            for t, v in zip(hist.times, values, strict=True)
        ]
    lines.append("# EOF")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class Server:
    url: str
    history: History
    process: subprocess.Popen
    log: Path


def _ready(url: str) -> bool:
    try:
        with urllib.request.urlopen(f"{url}/-/ready", timeout=2) as r:
            return r.status == 200
    except (urllib.error.URLError, OSError):
        return False


def _tail(path: Path, n: int = 20) -> str:
    try:
        return "\n".join(path.read_text(errors="replace").splitlines()[-n:])
    except OSError:
        return "(no log)"


def _stop(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=15)


@contextlib.contextmanager
def running_server(end: int | None = None) -> Iterator[Server]:
    """Backfill, start, wait for ``/-/ready``, yield, stop. ``end`` defaults to a few
    hours before now on a whole hour, so the blocks lie wholly in the past."""
    prometheus, promtool = binaries()
    if end is None:
        end = int(time.time()) // 3600 * 3600 - 3 * 3600
    hist = make_history(end)
    with tempfile.TemporaryDirectory(prefix="floorcast-prom-") as tmp:
        root = Path(tmp)
        data, om = root / "data", root / "history.om.txt"
        data.mkdir()
        write_openmetrics(om, hist)
        done = subprocess.run(
            [promtool, "tsdb", "create-blocks-from", "openmetrics", "--quiet", str(om), str(data)],
            capture_output=True,
            text=True,
            timeout=120,
        )
        if done.returncode != 0:
            raise HarnessError(
                f"promtool backfill failed ({done.returncode}): "
                f"{(done.stderr or done.stdout).strip()[-2000:]}"
            )
        config = root / "prometheus.yml"
        config.write_text("global:\n  scrape_interval: 1m\nscrape_configs: []\n")
        log = root / "prometheus.log"
        for _attempt in range(3):  # another process may grab the free port first
            port = free_port()
            url = f"http://127.0.0.1:{port}"
            with open(log, "wb") as out:
                proc = subprocess.Popen(
                    [
                        prometheus,
                        f"--config.file={config}",
                        f"--storage.tsdb.path={data}",
                        "--storage.tsdb.retention.time=10y",
                        f"--web.listen-address=127.0.0.1:{port}",
                        "--log.level=warn",
                    ],
                    stdin=subprocess.DEVNULL,
                    stdout=out,
                    stderr=subprocess.STDOUT,
                    cwd=root,
                    env={**os.environ, "GOMAXPROCS": "1"},
                )
            try:
                deadline = time.monotonic() + READY_TIMEOUT_S
                while proc.poll() is None and time.monotonic() < deadline:
                    if _ready(url):
                        break
                    time.sleep(0.1)
                if proc.poll() is None and _ready(url):
                    yield Server(url=url, history=hist, process=proc, log=log)
                    return
                if proc.poll() is None:
                    raise HarnessError(
                        f"prometheus not ready after {READY_TIMEOUT_S:g}s; log:\n{_tail(log)}"
                    )
                if "address already in use" not in _tail(log).lower():
                    raise HarnessError(
                        f"prometheus exited with {proc.returncode}; log:\n{_tail(log)}"
                    )
            finally:
                _stop(proc)
        raise HarnessError(f"prometheus could not bind a free port; log:\n{_tail(log)}")
