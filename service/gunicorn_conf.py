"""gunicorn settings, read from the environment.

Used by the container, ``make run`` and ``heartsway serve`` alike::

    gunicorn --config python:service.gunicorn_conf "service:create_app()"

==============================  =================  ==============================
variable                        default            gunicorn setting
==============================  =================  ==============================
``HEARTSWAY_BIND``              ``127.0.0.1:8000`` ``bind``
``HEARTSWAY_WORKERS``           ``2``              ``workers``
``HEARTSWAY_THREADS``           ``4``              ``threads`` (gthread worker class)
``HEARTSWAY_TIMEOUT_S``         ``60``             ``timeout`` (worker silent for)
``HEARTSWAY_GRACEFUL_TIMEOUT_S`` ``30``             ``graceful_timeout``
``HEARTSWAY_KEEPALIVE_S``       ``5``              ``keepalive``
``HEARTSWAY_MAX_REQUESTS``      ``1000``           ``max_requests`` (then recycled)
==============================  =================  ==============================

Workers are of the ``gthread`` class: each serves ``threads`` connections at
once, so a client that sends its body slowly holds one thread, not a whole
worker. An analysis's own time is bounded inside the worker
(``HEARTSWAY_MAX_COMPUTE_S``, see :mod:`service.deadline`); ``timeout`` is the
last resort for a worker whose main loop stops answering the master.
``max_requests`` (with 10 % jitter) recycles workers, bounding any slow growth
of memory.

gunicorn 25.1 and later open a control socket under ``$HOME`` by default,
which fails in a read-only container; it is turned off here (older versions
ignore the unknown setting).
"""

from __future__ import annotations

import os

from service import metrics as _metrics


def _int(name: str, default: int, *, minimum: int = 1) -> int:
    text = os.environ.get(name, str(default))
    try:
        value = int(text)
    except ValueError:
        raise SystemExit(f"`{name}` must be an integer >= {minimum}; got {text!r}.") from None
    if value < minimum:
        raise SystemExit(f"`{name}` must be an integer >= {minimum}; got {value}.")
    return value


bind = [os.environ.get("HEARTSWAY_BIND", "127.0.0.1:8000")]
workers = _int("HEARTSWAY_WORKERS", 2)
worker_class = "gthread"
threads = _int("HEARTSWAY_THREADS", 4)
timeout = _int("HEARTSWAY_TIMEOUT_S", 60)
graceful_timeout = _int("HEARTSWAY_GRACEFUL_TIMEOUT_S", 30)
keepalive = _int("HEARTSWAY_KEEPALIVE_S", 5)
max_requests = _int("HEARTSWAY_MAX_REQUESTS", 1000, minimum=0)
max_requests_jitter = max(1, max_requests // 10) if max_requests else 0

# Request line and headers stay small (gunicorn's defaults, stated here).
limit_request_line = 4094
limit_request_fields = 100
limit_request_field_size = 8190

# No control socket: nothing is written under $HOME (read-only containers).
control_socket_disable = True
# Worker heartbeat files in memory rather than on a possibly read-only disk.
worker_tmp_dir = "/dev/shm" if os.path.isdir("/dev/shm") else None
# The application writes its own JSON request lines; gunicorn's access log is off.
accesslog = None
errorlog = "-"
# The app is imported once in the master, then forked.
preload_app = True

# Prometheus metrics shared by the workers (service/metrics.py): a fresh directory per
# master, set here because the app (and prometheus_client) is loaded before any hook runs.
metrics_dir = _metrics.prepare_multiprocess_dir()
child_exit = _metrics.child_exit
