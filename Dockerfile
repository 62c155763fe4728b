# sounding: the HTTP service (and the CLI) in one image.
#
#   docker compose up --build        (see docker-compose.yml; needs SOUNDING_TOKEN)
#
# The data directory (SQLite store, index, trained forecasters) lives in /data,
# a volume, so rebuilding the image never touches a team's history.
FROM python:3.11-slim

# The embedding model ships inside a Python package (HF_*_OFFLINE: never reach for a hub).
ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    HF_HUB_OFFLINE=1 \
    TRANSFORMERS_OFFLINE=1 \
    SOUNDING_HOME=/data \
    SOUNDING_DEMO_DIR=/app/demo_data

# libgomp1: the OpenMP runtime LightGBM's wheel loads; the slim image lacks it.
RUN apt-get update \
    && apt-get install -y --no-install-recommends libgomp1 \
    && rm -rf /var/lib/apt/lists/*

WORKDIR /app
COPY pyproject.toml README.md ./
COPY models ./models
COPY service ./service
# The invented demo history, so `sounding demo` works in the image too.
COPY demo_data ./demo_data

# A plain `pip install .`: torch is pinned in pyproject.toml (torch==2.13.0) so
# pip takes the CPU build; no package index or other host is named here, pip
# uses whatever index the build environment is configured with.
# [postgres]: the driver for a shared PostgreSQL store (docker-compose.yml's shared profile).
RUN pip install '.[postgres]'

# Run as an unprivileged user that owns the data volume.
RUN useradd --system --uid 10001 --home-dir /data --shell /usr/sbin/nologin sounding \
    && mkdir -p /data /forecasters && chown sounding /data /forecasters
USER sounding
VOLUME ["/data"]
EXPOSE 8000

HEALTHCHECK --interval=30s --timeout=5s --start-period=60s --retries=3 \
    CMD ["python", "-c", "import sys, urllib.request; sys.exit(urllib.request.urlopen('http://127.0.0.1:8000/v1/health', timeout=4).status != 200)"]

# Binding 0.0.0.0 needs SOUNDING_TOKEN: `sounding serve` refuses to start without it.
CMD ["sounding", "serve", "--host", "0.0.0.0", "--port", "8000"]
