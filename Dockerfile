# floorcast operator image. Not built in this repository's CI (no container engine
# there); tests/test_packaging.py checks this file and the wheel it installs.
#
#   docker build -t floorcast:0.1.0 .
#   docker run --rm floorcast:0.1.0 --help
#
# Stage 1 builds the wheel and installs it with its runtime dependencies (no dev
# extras) into a virtualenv; stage 2 copies only that virtualenv, so no compiler,
# pip cache or source tree is left in the final image.
ARG PYTHON_IMAGE=python:3.12-slim

FROM ${PYTHON_IMAGE} AS build
ENV PIP_NO_CACHE_DIR=1 PIP_DISABLE_PIP_VERSION_CHECK=1
WORKDIR /src
COPY pyproject.toml README.md LICENSE ./
COPY operator ./operator
RUN python -m venv /opt/floorcast \
 && /opt/floorcast/bin/pip install --upgrade pip \
 && /opt/floorcast/bin/pip install . \
 && /opt/floorcast/bin/pip uninstall --yes pip setuptools wheel \
 && find /opt/floorcast -name '__pycache__' -prune -exec rm -rf {} +

FROM ${PYTHON_IMAGE}
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
