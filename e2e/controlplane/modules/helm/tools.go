//go:build tools

// Pins the Helm CLI floorcast's chart tests run; built with
// `go build helm.sh/helm/v3/cmd/helm` by e2e/controlplane/build.py.
package tools

import _ "helm.sh/helm/v3/cmd/helm"
