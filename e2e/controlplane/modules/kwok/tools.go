//go:build tools

// Pins kwok, which runs the harness's fake Nodes and the Pod lifecycle (scheduled
// Pods become Running, then Ready after a start-up delay) and serves kubelet-style
// resource metrics; built with `go build sigs.k8s.io/kwok/cmd/kwok`.
package tools

import _ "sigs.k8s.io/kwok/cmd/kwok"
