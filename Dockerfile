# berth: a multi-stage image. The build stage makes a wheel and its dependencies; the runtime stage
# is slim, runs as a non-root user, and checks its own health.
FROM python:3.11-slim AS build
WORKDIR /src
RUN pip install --no-cache-dir --upgrade pip wheel
COPY pyproject.toml README.md ./
COPY service ./service
RUN pip wheel --no-cache-dir --wheel-dir /wheels ".[postgres]"

FROM python:3.11-slim AS runtime
RUN apt-get update \
    && apt-get install -y --no-install-recommends fonts-dejavu-core \
    && rm -rf /var/lib/apt/lists/* \
    && useradd --system --uid 10001 --home-dir /srv/berth --create-home berth
COPY --from=build /wheels /wheels
RUN pip install --no-cache-dir /wheels/*.whl && rm -rf /wheels
WORKDIR /srv/berth
COPY pricing_examples ./pricing_examples
ENV BERTH_HOST=0.0.0.0 \
    BERTH_PORT=8000 \
    BERTH_DEMO_CATALOG=/srv/berth/pricing_examples/catalog.json \
    BERTH_DATABASE_URL=sqlite:////srv/berth/data/berth.db \
    PYTHONUNBUFFERED=1 \
    NUMBA_CACHE_DIR=/tmp/numba
# numba keeps the sweep kernel it compiles (once per container) in NUMBA_CACHE_DIR: /tmp stays writable
# where the root file system is read-only (deploy/kubernetes mounts an emptyDir there).
RUN mkdir -p /srv/berth/data && chown -R berth /srv/berth
USER berth
EXPOSE 8000
HEALTHCHECK --interval=15s --timeout=3s --start-period=20s --retries=3 \
    CMD python -c "import urllib.request,sys; sys.exit(urllib.request.urlopen('http://127.0.0.1:8000/healthz', timeout=2).status != 200)"
CMD ["berth", "serve", "--workers", "2"]
