# floorcast operator image. e2e/test_image.py builds it in this repository's CI
# without a Docker engine (e2e/image.py: buildah on a Debian base) and runs it the way
# the chart does; .github/workflows/release.yml builds and pushes it on a tag.
#
#   docker build -t floorcast:0.1.0 .
#   docker run --rm --entrypoint floorcast floorcast:0.1.0 --version
#
# Stage 1 builds the wheel and installs it with its runtime dependencies (no dev
# extras) into a virtualenv; stage 2 copies only that virtualenv, so no compiler,
# pip cache or source tree is left in the final image.
#
# BASE_IMAGE is any Debian-like image with python3 (>= 3.11, pyproject's
# requires-python), its venv module, groupadd and useradd. The default is the usual
# slim Python image; e2e/image.py passes a base it builds from Debian's own packages
# when no registry is reachable.
ARG BASE_IMAGE=python:3.12-slim

FROM ${BASE_IMAGE} AS build
ENV PIP_NO_CACHE_DIR=1 PIP_DISABLE_PIP_VERSION_CHECK=1
WORKDIR /src
COPY pyproject.toml README.md LICENSE ./
COPY operator ./operator
RUN python3 -m venv /opt/floorcast \
 && /opt/floorcast/bin/pip install --upgrade pip \
 && /opt/floorcast/bin/pip install . \
 && /opt/floorcast/bin/pip uninstall --yes pip setuptools wheel \
 && find /opt/floorcast -name '__pycache__' -prune -exec rm -rf {} +

FROM ${BASE_IMAGE}
LABEL org.opencontainers.image.title="floorcast" \
      org.opencontainers.image.description="Raises HPA minReplicas ahead of forecast peaks" \
      org.opencontainers.image.licenses="MIT"
RUN groupadd --system --gid 10001 floorcast \
 && useradd --system --uid 10001 --gid 10001 --home-dir /tmp --shell /usr/sbin/nologin floorcast
COPY --from=build /opt/floorcast /opt/floorcast
ENV PATH=/opt/floorcast/bin:$PATH \
    PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    HOME=/tmp \
    MPLCONFIGDIR=/tmp/matplotlib
# Numeric, so the kubelet can verify runAsNonRoot without reading /etc/passwd.
USER 10001:10001
EXPOSE 8080 8081
ENTRYPOINT ["floorcast", "run"]
