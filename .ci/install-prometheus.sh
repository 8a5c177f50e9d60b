#!/usr/bin/env bash
# Install Debian's `prometheus` package (server + promtool) for the tests in
# tests/test_prometheus.py, which start their own throw-away server on loopback.
#
# Idempotent: when both binaries are already on PATH nothing is installed. The
# package's own service is never left running: a policy-rc.d that refuses every
# start (exit 101, see invoke-rc.d(8) and init-system-helpers' README.policy-rc.d)
# is in place during the install, and any instance that started anyway is stopped.
# --no-install-recommends keeps out prometheus-node-exporter and its own service.
set -euo pipefail

SUDO=""
if [ "$(id -u)" -ne 0 ]; then
    if command -v sudo >/dev/null 2>&1; then
        SUDO="sudo"
    else
        echo "install-prometheus: need root (or sudo) to run apt-get" >&2
        exit 1
    fi
fi

if command -v prometheus >/dev/null 2>&1 && command -v promtool >/dev/null 2>&1; then
    echo "== prometheus already installed"
else
    echo "== installing prometheus (Debian package, no recommends, service not started)"
    POLICY=/usr/sbin/policy-rc.d
    BACKUP=""
    if [ -e "$POLICY" ]; then
        BACKUP="$($SUDO mktemp /usr/sbin/policy-rc.d.floorcast.XXXXXX)"
        $SUDO cp -p "$POLICY" "$BACKUP"
    fi
    restore() {
        if [ -n "$BACKUP" ]; then
            $SUDO mv -f "$BACKUP" "$POLICY"
        else
            $SUDO rm -f "$POLICY"
        fi
    }
    trap restore EXIT
    printf '#!/bin/sh\n# floorcast CI: never start services during apt-get install\nexit 101\n' \
        | $SUDO tee "$POLICY" >/dev/null
    $SUDO chmod 755 "$POLICY"

    $SUDO apt-get update
    $SUDO env DEBIAN_FRONTEND=noninteractive RUNLEVEL=1 \
        apt-get install -y --no-install-recommends prometheus

    # Belt and braces: if an init system started the packaged service anyway, stop
    # it and keep it from coming back at boot. The tests run their own server.
    if [ -d /run/systemd/system ] && command -v systemctl >/dev/null 2>&1; then
        $SUDO systemctl stop prometheus.service || true
        $SUDO systemctl disable prometheus.service || true
    elif [ -x /etc/init.d/prometheus ]; then
        $SUDO /etc/init.d/prometheus stop >/dev/null 2>&1 || true
        if command -v update-rc.d >/dev/null 2>&1; then
            $SUDO update-rc.d prometheus disable >/dev/null 2>&1 || true
        fi
    fi
    trap - EXIT
    restore
fi

echo "== versions"
prometheus --version
promtool --version
