#!/usr/bin/env bash
# Run floorcast's e2e suite against a kind cluster instead of the built-in control plane.
#
# The suite normally starts its own etcd + kube-apiserver + kube-controller-manager
# (no container engine needed). Where a container engine exists, this script runs the
# very same tests against a kind cluster, which adds a scheduler and kubelets: a check
# that nothing in the suite depends on quirks of the local harness.
#
# Usage:   e2e/kind.sh [pytest args...]        e.g.  e2e/kind.sh -k hpa -x
# Env:     KIND_CLUSTER_NAME  cluster name (default floorcast-e2e)
#          KIND_NODE_IMAGE    node image to use (default: kind's own default)
#          KEEP_CLUSTER=1     do not delete the cluster afterwards (a re-run reuses it)
#          PYTEST             pytest to run (default .venv/bin/pytest)
# Needs:   kind, a container engine kind supports, kubectl on PATH (optional: the suite
#          falls back to the kubectl built by e2e/controlplane).
#
# Tests of the local harness itself (restarting the API server, leak checks) skip on
# an external cluster; everything else must pass.
set -euo pipefail

repo="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cluster="${KIND_CLUSTER_NAME:-floorcast-e2e}"
pytest_bin="${PYTEST:-$repo/.venv/bin/pytest}"
workdir="$(mktemp -d -t floorcast-kind.XXXXXX)"
kubeconfig="$workdir/kubeconfig"

command -v kind >/dev/null || { echo "kind.sh: 'kind' is not on PATH" >&2; exit 2; }
[[ -x "$pytest_bin" ]] || { echo "kind.sh: no pytest at $pytest_bin (make unit creates .venv)" >&2; exit 2; }

created=0
cleanup() {
  if [[ "$created" == 1 && "${KEEP_CLUSTER:-0}" != 1 ]]; then
    kind delete cluster --name "$cluster" >/dev/null 2>&1 || true
  fi
  rm -rf "$workdir"
}
trap cleanup EXIT

if kind get clusters 2>/dev/null | grep -qx "$cluster"; then
  echo "== reusing kind cluster $cluster"
else
  echo "== creating kind cluster $cluster"
  args=(create cluster --name "$cluster" --wait 180s)
  if [[ -n "${KIND_NODE_IMAGE:-}" ]]; then args+=(--image "$KIND_NODE_IMAGE"); fi
  kind "${args[@]}"
  created=1
fi
kind get kubeconfig --name "$cluster" >"$kubeconfig"
chmod 600 "$kubeconfig"

echo "== running the e2e suite against kind ($cluster)"
cd "$repo"
# kind's controller-manager syncs HPAs every 15 s (ours: 2 s); the HPA test allows 30 s.
FLOORCAST_KUBECONFIG="$kubeconfig" "$pytest_bin" e2e -m e2e "$@"
