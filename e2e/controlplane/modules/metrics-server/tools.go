//go:build tools

// Pins metrics-server, the aggregated metrics.k8s.io API the real HPA controller
// reads; built with `go build sigs.k8s.io/metrics-server/cmd/metrics-server`.
package tools

import _ "sigs.k8s.io/metrics-server/cmd/metrics-server"
