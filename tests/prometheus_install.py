"""Prometheus and promtool for the history-source tests, unpacked once into the cache.

``make test`` (and ``make unit``) run this before pytest, so a fresh machine needs
nothing installed by hand: like the control plane, the binaries land in
``$FLOORCAST_CACHE`` (default ``${XDG_CACHE_HOME:-~/.cache}/floorcast``, the same
convention as ``e2e/controlplane/build.py``) under ``prometheus/<package version>/``.

They come from Debian's ``prometheus`` package (a package registry, like PyPI and the
Go module proxy): ``apt-get download`` fetches the ``.deb`` and ``dpkg-deb -x``
unpacks it into the cache. Nothing is installed system-wide, no service is set up or
started, and no root is needed as long as the apt package lists are present; only
when they are missing does this run ``apt-get update`` (as root) or say what to run.

Usage: ``python tests/prometheus_install.py`` (idempotent; prints where the binaries
are). ``found()`` is what the test harness calls to locate them.
"""

from __future__ import annotations

import fcntl
import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

PACKAGE = "prometheus"
NAMES = ("prometheus", "promtool")


class InstallError(RuntimeError):
    """Prometheus could not be fetched; the message says what to run instead."""


def cache_root() -> Path:
    if os.environ.get("FLOORCAST_CACHE"):
        return Path(os.environ["FLOORCAST_CACHE"])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "floorcast"


def cache_dir() -> Path:
    return cache_root() / "prometheus"


def _pair(bin_dir: Path) -> tuple[str, str] | None:
    paths = [bin_dir / n for n in NAMES]
    if all(p.is_file() and os.access(p, os.X_OK) for p in paths):
        return str(paths[0]), str(paths[1])
    return None


def found() -> tuple[str, str] | None:
    """(prometheus, promtool): the newest unpacked version in the cache, else both on
    PATH (a system install works too), else None."""
    root = cache_dir()
    if root.is_dir():
        versions = sorted(
            (d for d in root.iterdir() if d.is_dir() and not d.name.startswith(".")),
            key=lambda d: d.stat().st_mtime,
            reverse=True,
        )
        for d in versions:
            if pair := _pair(d / "usr" / "bin"):
                return pair
    on_path = [shutil.which(n) for n in NAMES]
    if all(on_path):
        return on_path[0], on_path[1]  # type: ignore[return-value]
    return None


def _say(msg: str) -> None:
    print(f"== {msg}", file=sys.stderr, flush=True)


def _run(cmd: list[str], cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(cmd, cwd=cwd, capture_output=True, text=True, check=False)


def _candidate() -> str | None:
    """The version apt would fetch, or None when the package lists do not know it."""
    out = _run(["apt-cache", "policy", PACKAGE]).stdout
    m = re.search(r"Candidate:\s*(\S+)", out)
    return None if m is None or m.group(1) == "(none)" else m.group(1)


def _refresh_lists() -> None:
    if os.geteuid() != 0:
        raise InstallError(
            f"the apt package lists do not know '{PACKAGE}'; run `sudo apt-get update` "
            "once, then `make test` again (or put prometheus and promtool on PATH)"
        )
    _say("apt package lists are missing: apt-get update")
    done = _run(["apt-get", "update"])
    if done.returncode != 0:
        raise InstallError(f"apt-get update failed: {done.stderr.strip()[-1000:]}")


def ensure() -> tuple[str, str]:
    """Fetch and unpack once (under a lock, so parallel runs never fetch twice)."""
    if shutil.which("apt-get") is None or shutil.which("dpkg-deb") is None:
        if pair := found():
            return pair
        raise InstallError(
            "fetching Prometheus needs apt-get and dpkg-deb (Debian or Ubuntu); "
            "elsewhere put prometheus and promtool (2.x) on PATH"
        )
    version = _candidate()
    if version is None:
        _refresh_lists()
        version = _candidate()
        if version is None:
            raise InstallError(f"apt has no '{PACKAGE}' package after apt-get update")
    target = cache_dir() / version.replace(":", "_")
    if pair := _pair(target / "usr" / "bin"):
        return pair
    cache_dir().mkdir(parents=True, exist_ok=True)
    with open(cache_dir() / ".lock", "w") as lock:
        fcntl.flock(lock, fcntl.LOCK_EX)
        if pair := _pair(target / "usr" / "bin"):
            return pair
        _say(f"fetching Debian's {PACKAGE} {version} into {target} (once; no system install)")
        with tempfile.TemporaryDirectory(dir=cache_dir(), prefix=".fetch-") as tmp:
            work = Path(tmp)
            cmd = ["apt-get", "download", f"{PACKAGE}={version}"]
            if os.geteuid() == 0:  # root: no _apt sandbox user for a private folder
                cmd[1:1] = ["-o", "APT::Sandbox::User=root"]
            done = _run(cmd, cwd=work)
            if done.returncode != 0:
                raise InstallError(
                    f"apt-get download {PACKAGE} failed: {done.stderr.strip()[-1000:]}"
                )
            (deb,) = work.glob("*.deb")
            unpacked = work / "root"
            done = _run(["dpkg-deb", "-x", str(deb), str(unpacked)])
            if done.returncode != 0:
                raise InstallError(f"dpkg-deb -x {deb.name} failed: {done.stderr.strip()}")
            pair = _pair(unpacked / "usr" / "bin")
            if pair is None:
                raise InstallError(f"{deb.name} has no usr/bin/prometheus and promtool")
            for binary in pair:
                check = _run([binary, "--version"])
                if check.returncode != 0:
                    raise InstallError(f"{binary} --version failed: {check.stderr.strip()}")
            unpacked.rename(target)
    pair = _pair(target / "usr" / "bin")
    assert pair is not None
    return pair


def main() -> int:
    try:
        prometheus, promtool = ensure()
    except InstallError as e:
        print(f"prometheus_install: {e}", file=sys.stderr)
        return 1
    _say(f"prometheus: {prometheus}")
    _say(f"promtool:   {promtool}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
