# heartsway REST service: gunicorn on the application factory and the night-job workers
# beside it (`heartsway serve`), as a non-root user; job files live in the /data volume.
FROM python:3.11-slim

ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_NO_CACHE_DIR=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1

RUN groupadd --system --gid 10001 heartsway \
    && useradd --system --uid 10001 --gid heartsway --no-create-home \
       --home-dir /nonexistent --shell /usr/sbin/nologin heartsway

WORKDIR /app
# Dependencies come from pyproject.toml; .dockerignore keeps tests, .git and venvs out.
COPY . .
RUN pip install --no-cache-dir "./[formats]" \
    && rm -rf /app/build /app/*.egg-info \
    && install -d -m 0700 -o 10001 -g 10001 /data

USER 10001:10001

# Worker count, timeouts and the bind address (see service/gunicorn_conf.py); night-job
# workers and where their uploads, results and the embedded queue are kept (service/job_store.py).
ENV HEARTSWAY_BIND=0.0.0.0:8000 \
    HEARTSWAY_WORKERS=2 \
    HEARTSWAY_JOB_WORKERS=1 \
    HEARTSWAY_DATA_DIR=/data \
    HEARTSWAY_TIMEOUT_S=60 \
    HEARTSWAY_GRACEFUL_TIMEOUT_S=30 \
    HEARTSWAY_KEEPALIVE_S=5 \
    HEARTSWAY_MAX_REQUESTS=1000 \
    MPLCONFIGDIR=/tmp/matplotlib

VOLUME ["/data"]
EXPOSE 8000

HEALTHCHECK --interval=30s --timeout=5s --start-period=20s --retries=3 \
    CMD ["python", "-m", "service.healthcheck"]

# gunicorn (no control socket: service/gunicorn_conf.py) and HEARTSWAY_JOB_WORKERS job workers,
# restarted when one dies; SIGTERM stops them all (service/cli.py).
CMD ["heartsway", "serve"]
