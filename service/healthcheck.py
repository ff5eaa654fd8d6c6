"""Container health check: exit 0 when ``/healthz`` answers 200 on the bound port.

Run as ``python -m service.healthcheck``; reads the port from ``HEARTSWAY_BIND``
(as :mod:`service.gunicorn_conf` does) and always asks the loopback address.
"""

from __future__ import annotations

import os
import sys
import urllib.error
import urllib.request


def healthz_url(bind: str) -> str:
    """The loopback /healthz URL for a gunicorn bind string such as ``0.0.0.0:8000``."""
    port = bind.rsplit(":", 1)[1] if ":" in bind else "8000"
    return f"http://127.0.0.1:{port}/healthz"


def main() -> int:
    """Exit status 0 when healthy, 1 otherwise."""
    url = healthz_url(os.environ.get("HEARTSWAY_BIND", "127.0.0.1:8000"))
    try:
        with urllib.request.urlopen(url, timeout=4) as response:
            return 0 if response.status == 200 else 1
    except (urllib.error.URLError, OSError) as error:
        print(f"unhealthy: {error}", file=sys.stderr)
        return 1


if __name__ == "__main__":
    raise SystemExit(main())
