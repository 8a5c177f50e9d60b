"""Build the repository's Dockerfile and run the image, with no Docker engine.

CI machines here have no Docker daemon and no container registry, only package
registries. So the image is built with Debian's ``buildah`` (``--isolation chroot``,
the ``vfs`` storage driver: no daemon, no overlay mounts, no user namespaces) and run
with ``podman`` + ``runc`` (crun 1.8 in Debian 12 refuses hybrid cgroup hierarchies,
which these machines have). ``FROM python:…-slim`` cannot be pulled, so the
Dockerfile's ``BASE_IMAGE`` is a root filesystem ``mmdebstrap`` builds from Debian's
own packages (python3 3.11 in bookworm; pyproject's requires-python is >=3.11) and
``podman import`` turns into a local image. Users with a registry keep the default
base; ``--base-image`` here takes any other.

Everything lives under ``$FLOORCAST_CACHE/image/`` (default
``~/.cache/floorcast/image/``): the base rootfs tarball (keyed by its package list,
so a change rebuilds it), and a private container storage (``--root``), so the
machine's own ``/var/lib/containers`` is never touched and the build's layer cache
survives between runs. Missing tools are installed with ``apt-get`` when running as
root (as the control-plane harness builds its binaries); otherwise ``ToolsMissing``
says what to install.

Usage: ``python -m e2e.image build`` (prints the tag and size),
``python -m e2e.image run -- ARGS…`` (``floorcast ARGS…`` as the chart's user).
"""

from __future__ import annotations

import argparse
import fcntl
import fnmatch
import hashlib
import json
import os
import re
import resource
import shutil
import subprocess
import sys
import time
import tomllib
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

from e2e.controlplane.build import cache_root

ROOT = Path(__file__).resolve().parents[1]
HELPERS_TPL = ROOT / "charts" / "floorcast" / "templates" / "_helpers.tpl"

DEBIAN_SUITE = "bookworm"
DEBIAN_SOURCES = (
    f"deb http://deb.debian.org/debian {DEBIAN_SUITE} main",
    f"deb http://deb.debian.org/debian {DEBIAN_SUITE}-updates main",
    f"deb http://deb.debian.org/debian-security {DEBIAN_SUITE}-security main",
)
# What the Dockerfile needs from a base: python3 with venv (and pip's bundled wheel),
# groupadd/useradd (passwd), CA certificates, and libstdc++ for the numpy and pandas
# wheels (their manylinux tags assume it; without it `import numpy` fails).
BASE_PACKAGES = ("python3", "python3-venv", "python-is-python3", "passwd",
                 "ca-certificates", "libstdc++6")  # fmt: skip
MMDEBSTRAP_OPTIONS = (
    "--variant=essential",
    # Pulls usr-is-merged instead of usrmerge, which would drag in ~45 MB of perl.
    "--hook-dir=/usr/share/mmdebstrap/hooks/maybe-merged-usr",
    "--skip=output/dev",
    "--aptopt=Acquire::Languages \"none\"",
    "--dpkgopt=path-exclude=/usr/share/man/*",
    "--dpkgopt=path-exclude=/usr/share/info/*",
    "--dpkgopt=path-exclude=/usr/share/locale/*",
    "--dpkgopt=path-exclude=/usr/share/doc/*",
    "--dpkgopt=path-include=/usr/share/doc/*/copyright",
)
#: The digest of what the image was built from (see context_digest).
CONTEXT_LABEL = "dev.floorcast.build-context"
TOOLS = {"buildah": "buildah", "podman": "podman", "runc": "runc", "mmdebstrap": "mmdebstrap"}


class ToolsMissing(RuntimeError):
    """The builder is absent and cannot be installed here; the message says why."""


@dataclass(frozen=True)
class ChartUser:
    """The UID/GID the chart's podSecurityContext runs the operator as."""

    uid: int
    gid: int


def _log(msg: str) -> None:
    print(f"[image] {msg}", file=sys.stderr, flush=True)


def cache_dir() -> Path:
    return cache_root() / "image"


def project_version() -> str:
    return tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]


def chart_user() -> ChartUser:
    """Read runAsUser/runAsGroup from the chart, so the test follows a change there."""
    text = HELPERS_TPL.read_text()
    uid = re.search(r"^runAsUser:\s*(\d+)\s*$", text, re.M)
    gid = re.search(r"^runAsGroup:\s*(\d+)\s*$", text, re.M)
    if not (uid and gid):
        raise RuntimeError(f"{HELPERS_TPL}: no runAsUser/runAsGroup in podSecurityContext")
    return ChartUser(int(uid.group(1)), int(gid.group(1)))


def _storage_flags() -> list[str]:
    d = cache_dir()
    return ["--root", str(d / "storage"), "--runroot", str(d / "run"), "--storage-driver", "vfs"]


def _run(cmd: Sequence[str], *, capture: bool = True, check: bool = True,
         timeout: float = 1800) -> subprocess.CompletedProcess[str]:  # fmt: skip
    proc = subprocess.run(list(cmd), capture_output=capture, text=True, timeout=timeout,
                          check=False)  # fmt: skip
    if check and proc.returncode != 0:
        tail = "\n".join(((proc.stdout or "") + (proc.stderr or "")).splitlines()[-40:])
        raise RuntimeError(f"{' '.join(cmd[:3])} … exited {proc.returncode}:\n{tail}")
    return proc


@contextmanager
def _locked() -> Iterator[None]:
    """One builder at a time: two sessions sharing the cache must not build twice."""
    cache_dir().mkdir(parents=True, exist_ok=True)
    with open(cache_dir() / ".lock", "w") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(fh, fcntl.LOCK_UN)


def ensure_tools() -> None:
    """Install buildah, podman, runc and mmdebstrap from apt when missing (root only)."""
    missing = [pkg for tool, pkg in TOOLS.items() if shutil.which(tool) is None]
    if not missing:
        return
    if os.geteuid() != 0 or shutil.which("apt-get") is None:
        raise ToolsMissing(
            f"{', '.join(missing)} not installed and this is not a root shell with apt-get;"
            f" install them (Debian: apt-get install {' '.join(missing)})"
        )
    env = {**os.environ, "DEBIAN_FRONTEND": "noninteractive"}
    lists = Path("/var/lib/apt/lists")
    if not any(lists.glob("*_Packages*")):
        _log("apt-get update (no package lists yet)")
        subprocess.run(["apt-get", "update"], env=env, check=True, capture_output=True)
    _log(f"apt-get install {' '.join(missing)}")
    proc = subprocess.run(
        ["apt-get", "install", "-y", "--no-install-recommends", *missing],
        env=env, capture_output=True, text=True, check=False,
    )  # fmt: skip
    if proc.returncode != 0:
        raise RuntimeError(f"apt-get install {' '.join(missing)} failed:\n{proc.stderr[-2000:]}")


def _base_key() -> str:
    spec = "\n".join((DEBIAN_SUITE, *DEBIAN_SOURCES, *BASE_PACKAGES, *MMDEBSTRAP_OPTIONS))
    return hashlib.sha256(spec.encode()).hexdigest()[:12]


def _image_exists(ref: str) -> bool:
    return _run(["podman", *_storage_flags(), "image", "exists", ref], check=False).returncode == 0


def ensure_base() -> str:
    """The local Debian base image's reference; built (~30 s) and imported when missing."""
    key = _base_key()
    ref = f"localhost/floorcast-base:{DEBIAN_SUITE}-{key}"
    if _image_exists(ref):
        return ref
    tarball = cache_dir() / f"base-{DEBIAN_SUITE}-{key}.tar"
    if not tarball.exists():
        _log(f"mmdebstrap {DEBIAN_SUITE} with {', '.join(BASE_PACKAGES)} -> {tarball.name}")
        partial = tarball.with_suffix(".tar.partial")
        started = time.monotonic()
        _run(["mmdebstrap", *MMDEBSTRAP_OPTIONS, f"--include={','.join(BASE_PACKAGES)}",
              "--format=tar", DEBIAN_SUITE, str(partial), *DEBIAN_SOURCES])  # fmt: skip
        partial.rename(tarball)
        _log(f"  rootfs built in {time.monotonic() - started:.0f} s")
    _log(f"podman import {tarball.name} as {ref}")
    _run(["podman", *_storage_flags(), "import", "--change", 'CMD ["python3"]',
          str(tarball), ref])  # fmt: skip
    return ref


def _pip_config() -> list[str]:
    """Build-time mounts so pip in the build reaches PyPI the way this host does.

    A host behind a TLS-inspecting proxy trusts its CA through the system bundle; the
    base's own bundle does not have it. The host's bundle and a pip.conf pointing at
    it are bind-mounted for each RUN only: nothing of the host lands in the image.
    """
    bundle = Path("/etc/ssl/certs/ca-certificates.crt")
    lines = ["[global]"]
    mounts: list[str] = []
    if bundle.is_file():
        mounts += ["--volume", f"{bundle}:{bundle}:ro"]
        lines.append(f"cert = {bundle}")
    for env, key in (("PIP_INDEX_URL", "index-url"), ("PIP_EXTRA_INDEX_URL", "extra-index-url"),
                     ("PIP_DEFAULT_TIMEOUT", "timeout")):  # fmt: skip
        if os.environ.get(env):
            lines.append(f"{key} = {os.environ[env]}")
    conf = cache_dir() / "pip.conf"
    conf.write_text("\n".join(lines) + "\n")
    return [*mounts, "--volume", f"{conf}:/etc/pip.conf:ro"]


def _context_files() -> list[Path]:
    """The files .dockerignore lets into the build context.

    It is "ignore everything (``**``), re-include ``!`` paths, drop the patterns after"
    (tests/test_packaging.py pins that shape), so that is all this reads.
    """
    rules = [ln.strip() for ln in (ROOT / ".dockerignore").read_text().splitlines()
             if ln.strip() and not ln.startswith("#")]  # fmt: skip
    keep = [r[1:].rstrip("/") for r in rules if r.startswith("!")]
    drop = [r for r in rules if not r.startswith("!") and r != "**"]
    drop += [r.replace("**/", "") for r in drop if "**/" in r]  # `**` may match no folder

    def dropped(rel: str) -> bool:
        parts = rel.split("/")
        prefixes = ("/".join(parts[: i + 1]) for i in range(len(parts)))
        return any(fnmatch.fnmatchcase(pre, pat) for pre in prefixes for pat in drop)

    files: list[Path] = []
    for name in keep:
        top = ROOT / name
        for path in sorted(top.rglob("*")) if top.is_dir() else [top]:
            if path.is_file() and not dropped(path.relative_to(ROOT).as_posix()):
                files.append(path)
    return files


def context_digest(base: str) -> str:
    """What the image is built from: Dockerfile, .dockerignore, context files, base ID."""
    h = hashlib.sha256()
    for path in [ROOT / "Dockerfile", ROOT / ".dockerignore", *_context_files()]:
        h.update(path.relative_to(ROOT).as_posix().encode() + b"\0")
        h.update(hashlib.sha256(path.read_bytes()).digest())
    base_id = _run(["podman", *_storage_flags(), "image", "inspect", "--format", "{{.Id}}",
                    base], check=False).stdout.strip()  # fmt: skip
    h.update((base_id or base).encode())
    return h.hexdigest()


def build(base_image: str | None = None, tag: str | None = None, *,
          rebuild: bool = False) -> str:  # fmt: skip
    """Build the Dockerfile; return the image reference.

    An image already tagged with the same context digest (label CONTEXT_LABEL) is
    what a build would produce, so it is reused unless ``rebuild`` (or
    FLOORCAST_IMAGE_REBUILD=1). Otherwise buildah's layer cache still applies; the
    build stage is tagged too, so pruning dangling images afterwards drops
    superseded builds but keeps the current one's cache.
    """
    ensure_tools()
    tag = tag or f"localhost/floorcast:{project_version()}"
    rebuild = rebuild or os.environ.get("FLOORCAST_IMAGE_REBUILD") == "1"
    with _locked():
        base = base_image or ensure_base()
        digest = context_digest(base)
        if not rebuild and _image_exists(tag) and image_label(tag, CONTEXT_LABEL) == digest:
            _log(f"{tag} is up to date (context {digest[:12]}); FLOORCAST_IMAGE_REBUILD=1 rebuilds")
            return tag
        common = ["buildah", *_storage_flags(), "bud", "--isolation", "chroot", "--layers",
                  "--force-rm", "--build-arg", f"BASE_IMAGE={base}", *_pip_config(),
                  "-f", str(ROOT / "Dockerfile")]  # fmt: skip
        if rebuild:
            common.append("--no-cache")
        started = time.monotonic()
        _log(f"buildah bud --build-arg BASE_IMAGE={base} -t {tag} (context {digest[:12]})")
        _run([*common, "--target", "build", "-t", "localhost/floorcast-build:cache", str(ROOT)])
        _run([*common, "--label", f"{CONTEXT_LABEL}={digest}", "-t", tag, str(ROOT)])
        _log(f"  built in {time.monotonic() - started:.0f} s")
        _run(["podman", *_storage_flags(), "image", "prune", "--force"], check=False)
    return tag


def created_unix(ref: str) -> int:
    out = _run(["podman", *_storage_flags(), "image", "inspect", "--format", "{{.Created.Unix}}",
                ref])  # fmt: skip
    return int(out.stdout.strip())


def image_label(ref: str, label: str) -> str | None:
    labels = json.loads(image_config(ref, "Labels") or "null") or {}
    return labels.get(label)


def image_size(ref: str) -> int:
    """Uncompressed size in bytes, as `podman images` reports it (base included)."""
    out = _run(["podman", *_storage_flags(), "image", "inspect", "--format", "{{.Size}}", ref])
    return int(out.stdout.strip())


def image_config(ref: str, field: str) -> str:
    fmt = "{{json .Config." + field + "}}"
    return _run(["podman", *_storage_flags(), "image", "inspect", "--format", fmt, ref]).stdout


def _ulimits() -> list[str]:
    """Limits at or below the current hard limits.

    podman's defaults (1048576 open files) exceed what a process without
    CAP_SYS_RESOURCE may set, and podman lowers its own RLIMIT_NPROC hard limit to
    32768 before starting the runtime; 4096 of each is plenty for one CLI process.
    """
    flags = []
    for name, lim in (("nofile", resource.RLIMIT_NOFILE), ("nproc", resource.RLIMIT_NPROC)):
        hard = resource.getrlimit(lim)[1]
        value = 4096 if hard == resource.RLIM_INFINITY else min(4096, hard)
        flags += ["--ulimit", f"{name}={value}:{value}"]
    return flags


def run(ref: str, args: Sequence[str], *, entrypoint: str | None = None,
        timeout: float = 300) -> subprocess.CompletedProcess[str]:  # fmt: skip
    """Run the image the way the chart's Pod does; return the finished process.

    As in charts/floorcast/templates/_helpers.tpl: the chart's UID/GID, a read-only
    root filesystem with only /tmp writable (the chart's emptyDir), all capabilities
    dropped, no privilege escalation, the runtime's default seccomp profile. No
    network: nothing here needs one.
    """
    user = chart_user()
    cmd = ["podman", *_storage_flags(), "--runtime", "runc", "run", "--rm",
           "--network", "none", *_ulimits(), "--user", f"{user.uid}:{user.gid}",
           "--read-only", "--read-only-tmpfs=false", "--tmpfs", "/tmp:rw,mode=1777,size=64m",
           "--cap-drop", "ALL", "--security-opt", "no-new-privileges"]  # fmt: skip
    if entrypoint is not None:
        cmd += ["--entrypoint", entrypoint]
    return _run([*cmd, ref, *args], check=False, timeout=timeout)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m e2e.image", description=__doc__.split("\n")[0])
    parser.add_argument("--base-image", help="use this base instead of the Debian-built one")
    parser.add_argument("--tag", help="image reference (default localhost/floorcast:<version>)")
    parser.add_argument("--rebuild", action="store_true", help="build even if up to date")
    parser.add_argument("command", choices=("build", "run"))
    parser.add_argument("args", nargs="*", help="for run: floorcast's arguments")
    ns = parser.parse_args(argv)
    try:
        ref = build(ns.base_image, ns.tag, rebuild=ns.rebuild)
    except ToolsMissing as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    if ns.command == "build":
        print(f"{ref} {image_size(ref) / 1e6:.0f} MB (uncompressed)")
        return 0
    proc = run(ref, ns.args or ["--version"], entrypoint="floorcast")
    sys.stdout.write(proc.stdout)
    sys.stderr.write(proc.stderr)
    return proc.returncode


if __name__ == "__main__":
    sys.exit(main())
