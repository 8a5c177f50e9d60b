"""Child processes that cannot outlive the test run.

A control-plane component left running after a failed test holds ports, memory and
an etcd data dir, and makes the next run's failures mysterious. So every component
runs in its own process group (so a stop reaches anything it forked), is stopped
with SIGTERM then SIGKILL, and is registered for clean-up at interpreter exit and on
SIGTERM/SIGHUP. When started from the main thread it also gets PR_SET_PDEATHSIG, so
even a SIGKILLed test runner takes its components down with it.
"""

from __future__ import annotations

import atexit
import contextlib
import ctypes
import itertools
import os
import re
import signal
import socket
import ssl
import subprocess
import sys
import threading
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Sequence
from pathlib import Path
from types import FrameType

_RUN_MARKER = "==== [floorcast e2e harness] "
_ERROR_LINE = re.compile(r'^(Error: |[EF]\d{4} )|"level":"(error|fatal|panic)"|^panic: ')
#: Error-level lines every healthy start prints; they would only mislead.
_NOISE = re.compile(r"The manifest file is empty")


class ControlPlaneError(RuntimeError):
    """The control plane (or one component) failed; the message carries its log tail."""


# --------------------------------------------------------------------------- clean-up

_cleanups: dict[int, Callable[[], None]] = {}
_ids = itertools.count()
_lock = threading.RLock()
_handlers_installed = False


def register_cleanup(fn: Callable[[], None]) -> int:
    """Run ``fn`` at exit or on SIGTERM/SIGHUP unless unregistered first; returns a handle."""
    _install_handlers()
    with _lock:
        handle = next(_ids)
        _cleanups[handle] = fn
        return handle


def unregister_cleanup(handle: int) -> None:
    with _lock:
        _cleanups.pop(handle, None)


def cleanup_all() -> None:
    """Run every pending clean-up, newest first (a control plane before its processes)."""
    with _lock:
        pending = sorted(_cleanups.items(), reverse=True)
        _cleanups.clear()
    for _, fn in pending:
        try:
            fn()
        except Exception as exc:  # keep going: one failure must not leak the rest
            print(f"[controlplane] clean-up failed: {exc!r}", file=sys.stderr)


def _on_signal(signum: int, frame: FrameType | None) -> None:
    cleanup_all()
    previous = _previous_handlers.get(signum, signal.SIG_DFL)
    if callable(previous):
        previous(signum, frame)
    elif previous != signal.SIG_IGN:
        # Re-deliver with the default action so the exit status still says "killed by".
        signal.signal(signum, signal.SIG_DFL)
        os.kill(os.getpid(), signum)


_previous_handlers: dict[int, object] = {}


def _install_handlers() -> None:
    global _handlers_installed
    with _lock:
        if _handlers_installed:
            return
        _handlers_installed = True
    atexit.register(cleanup_all)
    if threading.current_thread() is not threading.main_thread():
        return  # signal handlers can only be set from the main thread; atexit still works
    for sig in (signal.SIGTERM, signal.SIGHUP):
        _previous_handlers[sig] = signal.getsignal(sig)
        signal.signal(sig, _on_signal)


_libc = ctypes.CDLL(None, use_errno=True)  # loaded here, not in the forked child
_PR_SET_PDEATHSIG = 1


def _die_with_parent(parent: int) -> Callable[[], None]:
    def pre_exec() -> None:  # runs in the child between fork and exec
        with contextlib.suppress(Exception):
            _libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
        if os.getppid() != parent:  # the parent died before prctl took effect
            os._exit(1)

    return pre_exec


# --------------------------------------------------------------------------- processes


class ManagedProcess:
    """One component: started into its own process group, logging to a file."""

    def __init__(self, name: str, argv: Sequence[str], log_path: Path) -> None:
        self.name = name
        self.argv = list(argv)
        self.log_path = log_path
        self._proc: subprocess.Popen[bytes] | None = None
        self._cleanup: int | None = None

    @property
    def pid(self) -> int | None:
        return self._proc.pid if self._proc else None

    def start(self) -> None:
        """Start the process, appending to its log (a restart keeps the earlier output)."""
        if self.alive():
            raise ControlPlaneError(f"{self.name} is already running (pid {self.pid})")
        with open(self.log_path, "ab") as log:
            log.write(f"\n{_RUN_MARKER}{time.strftime('%H:%M:%S')} starting {self.name}\n".encode())
            log.flush()
            # PR_SET_PDEATHSIG fires when the *thread* that forked exits, so only use
            # it from the main thread; a restart from a worker thread relies on the
            # atexit/signal clean-up instead of dying with that thread.
            in_main = threading.current_thread() is threading.main_thread()
            pre = _die_with_parent(os.getpid()) if in_main else None
            self._proc = subprocess.Popen(
                self.argv,
                stdin=subprocess.DEVNULL,
                stdout=log,
                stderr=subprocess.STDOUT,
                start_new_session=True,
                preexec_fn=pre,  # only a prctl syscall: safe even with threads around
            )
        self._cleanup = register_cleanup(self.stop)

    def alive(self) -> bool:
        return self._proc is not None and self._proc.poll() is None

    def returncode(self) -> int | None:
        return self._proc.poll() if self._proc else None

    def stop(self, grace: float = 10.0) -> None:
        """SIGTERM the process group, SIGKILL whatever is left after ``grace`` seconds."""
        proc = self._proc
        if proc is None:
            return
        if self._cleanup is not None:
            unregister_cleanup(self._cleanup)
            self._cleanup = None
        if proc.poll() is None:
            _signal_group(proc.pid, signal.SIGTERM)
            try:
                proc.wait(timeout=grace)
            except subprocess.TimeoutExpired:
                _signal_group(proc.pid, signal.SIGKILL)
                proc.wait(timeout=10)
        # The leader may be gone while something it forked still holds the group.
        _signal_group(proc.pid, signal.SIGKILL)

    def _current_run_log(self) -> str:
        try:
            with open(self.log_path, "rb") as f:
                f.seek(0, os.SEEK_END)
                f.seek(max(0, f.tell() - 1024 * 1024))
                text = f.read().decode(errors="replace")
        except OSError as exc:
            return f"(no log: {exc})"
        marker = text.rfind(_RUN_MARKER)  # only this start's output, not a previous one's
        return text[marker:] if marker >= 0 else text

    def tail(self, lines: int = 40) -> str:
        """The last lines of the log, for error messages."""
        return "\n".join(self._current_run_log().splitlines()[-lines:])

    def error_lines(self, limit: int = 10) -> list[str]:
        """The log's error/fatal lines (klog E/F, cobra "Error:", zap error level).

        A component that rejects its flags prints the error and then hundreds of
        lines of usage, so the tail alone would hide the one line that matters.
        """
        found = [
            ln
            for ln in self._current_run_log().splitlines()
            if _ERROR_LINE.search(ln) and not _NOISE.search(ln)
        ]
        return found[-limit:]

    def describe_failure(self, what: str) -> str:
        errors = self.error_lines()
        shown = f"--- error lines ---\n{chr(10).join(errors)}\n" if errors else ""
        return (
            f"{what}\n{shown}--- last lines of {self.name} log ({self.log_path}) ---\n"
            f"{self.tail()}\n---"
        )


def _signal_group(pgid: int, sig: int) -> None:
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(pgid, sig)


def pid_alive(pid: int) -> bool:
    """Whether a pid still exists and is not a zombie (a zombie holds no resources)."""
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except (FileNotFoundError, ProcessLookupError, IndexError):
        return False


# --------------------------------------------------------------------------- waiting


def free_ports(count: int) -> list[int]:
    """``count`` distinct free TCP ports on 127.0.0.1 (held together, so no duplicates)."""
    socks = []
    try:
        for _ in range(count):
            s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
            s.bind(("127.0.0.1", 0))
            socks.append(s)
        return [s.getsockname()[1] for s in socks]
    finally:
        for s in socks:
            s.close()


class HttpProbe:
    """GET a URL until it answers 200; remembers the last answer for error messages."""

    def __init__(self, url: str, context: ssl.SSLContext | None = None) -> None:
        self.url = url
        self.context = context
        self.last = "no answer yet"

    def __call__(self) -> bool:
        try:
            with urllib.request.urlopen(self.url, timeout=3, context=self.context) as resp:
                self.last = f"HTTP {resp.status}"
                return resp.status == 200
        except urllib.error.HTTPError as exc:
            body = exc.read().decode(errors="replace")
            failing = [ln for ln in body.splitlines() if "failed" in ln]
            self.last = f"HTTP {exc.code}: {' | '.join(failing) or body[:500]}"
        except (OSError, ssl.SSLError) as exc:
            self.last = f"{type(exc).__name__}: {exc}"
        return False


def wait_for(
    what: str,
    probe: HttpProbe | Callable[[], bool],
    watched: Sequence[ManagedProcess],
    timeout: float,
) -> float:
    """Poll ``probe`` until it succeeds; fail fast, with logs, if a watched process dies.

    Returns the seconds it took, for start-up timing reports.
    """
    started = time.monotonic()
    deadline = started + timeout
    while True:
        for proc in watched:
            if not proc.alive():
                raise ControlPlaneError(
                    proc.describe_failure(
                        f"{proc.name} exited with code {proc.returncode()} while waiting for {what}"
                    )
                )
        if probe():
            return time.monotonic() - started
        if time.monotonic() > deadline:
            culprit = watched[-1]
            raise ControlPlaneError(
                culprit.describe_failure(
                    f"timed out after {timeout:.0f} s waiting for {what} "
                    f"({getattr(probe, 'url', 'probe')}; "
                    f"last answer: {getattr(probe, 'last', 'not yet')})"
                )
            )
        time.sleep(0.25)


def insecure_context() -> ssl.SSLContext:
    """For health probes of components that serve a self-signed certificate they made
    themselves (controller-manager, scheduler): we only ask whether they are healthy."""
    ctx = ssl.create_default_context()
    ctx.check_hostname = False
    ctx.verify_mode = ssl.CERT_NONE
    return ctx
