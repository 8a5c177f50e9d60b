"""Where the history-source tests find Prometheus: the cache first, then PATH."""

from __future__ import annotations

import os
from pathlib import Path

import prometheus_install as pi
import pytest


def _fake(bin_dir: Path, names: tuple[str, ...] = pi.NAMES) -> None:
    bin_dir.mkdir(parents=True, exist_ok=True)
    for n in names:
        p = bin_dir / n
        p.write_text("#!/bin/sh\n")
        p.chmod(0o755)


def test_cache_wins_over_path_and_half_unpacked_versions_are_ignored(tmp_path, monkeypatch):
    monkeypatch.setenv("FLOORCAST_CACHE", str(tmp_path / "cache"))
    on_path = tmp_path / "path"
    _fake(on_path)
    monkeypatch.setenv("PATH", f"{on_path}{os.pathsep}{os.environ['PATH']}")
    assert pi.found() == (str(on_path / "prometheus"), str(on_path / "promtool"))
    good = pi.cache_dir() / "2.42.0+ds-5" / "usr" / "bin"
    _fake(good)
    half = pi.cache_dir() / "2.99.0" / "usr" / "bin"
    _fake(half, names=("prometheus",))  # promtool missing: not a usable install
    os.utime(half.parents[1], (2e9, 2e9))  # newer, so it would win if it counted
    assert pi.found() == (str(good / "prometheus"), str(good / "promtool"))


def test_nothing_anywhere_is_none(tmp_path, monkeypatch):
    monkeypatch.setenv("FLOORCAST_CACHE", str(tmp_path / "cache"))
    monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    assert pi.found() is None


def test_without_package_lists_a_non_root_user_is_told_what_to_run(tmp_path, monkeypatch):
    monkeypatch.setenv("FLOORCAST_CACHE", str(tmp_path / "cache"))
    monkeypatch.setattr(pi.shutil, "which", lambda name: f"/usr/bin/{name}")
    monkeypatch.setattr(pi, "_candidate", lambda: None)
    monkeypatch.setattr(pi.os, "geteuid", lambda: 1000)
    with pytest.raises(pi.InstallError, match=r"run `sudo apt-get update` once"):
        pi.ensure()
    assert not pi.cache_dir().exists()  # nothing half-fetched


def test_without_apt_and_without_binaries_the_error_says_use_path(tmp_path, monkeypatch):
    monkeypatch.setenv("FLOORCAST_CACHE", str(tmp_path / "cache"))
    monkeypatch.setattr(pi.shutil, "which", lambda name: None)
    with pytest.raises(pi.InstallError, match=r"put prometheus and promtool \(2\.x\) on PATH"):
        pi.ensure()
