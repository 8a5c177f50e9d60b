# floorcast developer entry points. The README's two commands are `make demo` and
# `make test`; both work on a fresh machine (they create .venv and install into it).
PYTHON ?= python3
VENV ?= .venv
BIN := $(VENV)/bin

.PHONY: demo test unit e2e lint controlplane prometheus bench clean manifests

$(BIN)/.installed: pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip
	$(BIN)/python -m pip install --quiet -e '.[dev]'
	touch $@

## demo: floorcast live on a local control plane (built once) with the built-in demo shop
demo: $(BIN)/.installed
	$(BIN)/floorcast demo

## test: lint, build (or reuse) the control plane and Prometheus, run unit and e2e tests
test: lint controlplane prometheus
	$(BIN)/pytest

unit: $(BIN)/.installed prometheus
	$(BIN)/pytest tests

e2e: controlplane
	$(BIN)/pytest e2e

lint: $(BIN)/.installed
	$(BIN)/ruff check operator tests e2e

## controlplane: build etcd, kube-apiserver, kube-controller-manager, kubectl once
controlplane: $(BIN)/.installed
	$(BIN)/python -m e2e.controlplane build

## prometheus: Debian's prometheus + promtool unpacked into the cache once (no root
## needed while apt's package lists exist); the history-source tests run them
prometheus: $(BIN)/.installed
	$(BIN)/python tests/prometheus_install.py

bench: $(BIN)/.installed
	$(BIN)/python tests/perf/bench_planning.py

clean:
	rm -rf $(VENV) .pytest_cache .ruff_cache .hypothesis floorcast-demo

## manifests: regenerate docs/install/ (plain kubectl manifests) from the chart's defaults
manifests: $(BIN)/.installed
	$(BIN)/python -m e2e.manifests
