"""``python -m e2e.controlplane build|up``: the harness by hand, for demos and debugging.

``build`` only fills the binary cache (so a CI image or a laptop can pay the
one-time build up front); ``up`` starts a control plane, prints how to reach it and
keeps it running until Ctrl-C, then removes every trace of it.
"""

from __future__ import annotations

import argparse
import signal
import sys
import time

from e2e.controlplane import build
from e2e.controlplane.process import ControlPlaneError
from e2e.controlplane.runner import ControlPlane


def _build(_: argparse.Namespace) -> int:
    for path in build.ensure_all():
        print(path)
    return 0


def _interrupt(signum: int, frame: object) -> None:
    raise KeyboardInterrupt


def _up(args: argparse.Namespace) -> int:
    cp = ControlPlane(build.ensure_built(), keep_run_dir=args.keep)
    try:
        cp.start()
    except ControlPlaneError as exc:
        print(f"control plane failed to start:\n{exc}", file=sys.stderr)
        return 1
    # SIGTERM (e.g. `timeout`, a process manager) should end as cleanly as Ctrl-C.
    signal.signal(signal.SIGTERM, _interrupt)
    try:
        timings = ", ".join(f"{k} {v:.1f}s" for k, v in cp.startup_seconds.items())
        print(f"control plane up ({timings})", file=sys.stderr)
        print(f"API server:  {cp.server}", file=sys.stderr)
        print(f"logs:        {cp.run_dir}/logs", file=sys.stderr)
        print(f"kubectl:     {cp.kubectl_binary()}", file=sys.stderr)
        print("Ctrl-C stops it and removes its run directory.", file=sys.stderr)
        # stdout carries only what a script wants: `eval "$(... up | tail -1)"`.
        print(cp.kubeconfig)
        print(f"export KUBECONFIG={cp.kubeconfig}", flush=True)
        while True:
            cp.check_alive()
            time.sleep(1)
    except ControlPlaneError as exc:
        print(exc, file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("\nstopping…", file=sys.stderr)
        return 0
    finally:
        cp.stop()


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m e2e.controlplane", description=__doc__)
    sub = parser.add_subparsers(dest="command", required=True)
    sub.add_parser("build", help="build the control-plane binaries into the cache").set_defaults(
        func=_build
    )
    up = sub.add_parser("up", help="start a control plane and keep it running until Ctrl-C")
    up.add_argument("--keep", action="store_true", help="keep the run directory (logs) on exit")
    up.set_defaults(func=_up)
    args = parser.parse_args(argv)
    return int(args.func(args))


if __name__ == "__main__":
    sys.exit(main())
