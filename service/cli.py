"""The ``heartsway`` command line: serve, analyze FILE, demo.

``serve`` runs gunicorn on the application factory with the settings of
:mod:`service.gunicorn_conf`; ``analyze`` runs a CSV file through the same
schemas and engine as the API and prints the same JSON; ``demo`` analyses the
demo scenario's trace, or sends it to a running service with ``--url``.

Exit codes: 0 success, 2 bad input (the problem is printed on stderr as
JSON), 3 no usable signal, 4 the service could not be reached.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Sequence
from pathlib import Path
from typing import Any

GUNICORN_ARGS = ["--config", "python:service.gunicorn_conf", "service:create_app()"]


def _print_json(document: Any) -> None:
    json.dump(document, sys.stdout, indent=2, allow_nan=False)
    sys.stdout.write("\n")


def _env_default(name: str, default: str) -> str:
    return os.environ.get(name, default)


def _serve(args: argparse.Namespace) -> int:
    env = dict(os.environ)
    env["HEARTSWAY_BIND"] = f"{args.host}:{args.port}"
    env["HEARTSWAY_WORKERS"] = str(args.workers)
    command = [sys.executable, "-m", "gunicorn", *GUNICORN_ARGS]
    os.execve(sys.executable, command, env)
    return 0  # not reached


def _analyze(args: argparse.Namespace) -> int:
    from features.errors import InvalidInputError, UnusableSignalError
    from schemas.csv_input import csv_request_body
    from schemas.errors import SchemaValidationError, flatten_errors
    from schemas.requests import AnalysisRequestSchema
    from service.analysis import run_analysis

    try:
        text = Path(args.file).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        print(json.dumps({"error": "unreadable_file", "detail": str(error)}), file=sys.stderr)
        return 2
    form = {"sampling_rate_hz": args.rate, "quantity": args.quantity, "unit": args.unit}
    if args.include:
        form["include"] = args.include
    try:
        request = AnalysisRequestSchema().load(csv_request_body(text, form))
        document = run_analysis(request)
    except SchemaValidationError as error:
        errors = flatten_errors(error.messages)
        print(json.dumps({"error": "validation", "errors": errors}), file=sys.stderr)
        return 2
    except InvalidInputError as error:
        detail = {"field": error.field, "detail": error.message}
        print(json.dumps({"error": "validation", "errors": [detail]}), file=sys.stderr)
        return 2
    except UnusableSignalError as error:
        detail = {"error": "unusable_signal", "reason": error.reason, "detail": error.message}
        print(json.dumps(detail), file=sys.stderr)
        return 3
    _print_json(document)
    return 0


def _wait_for(url: str, wait_s: float) -> bool:
    deadline = time.monotonic() + wait_s
    while True:
        try:
            with urllib.request.urlopen(url, timeout=2) as response:
                if response.status == 200:
                    return True
        except (urllib.error.URLError, OSError):
            pass
        if time.monotonic() >= deadline:
            return False
        time.sleep(0.25)


def _demo(args: argparse.Namespace) -> int:
    from service.demo import demo_request_body

    body = demo_request_body()
    if args.request:
        json.dump(body, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
        return 0
    if args.url is None:
        from schemas.requests import AnalysisRequestSchema
        from service.analysis import run_analysis

        _print_json(run_analysis(AnalysisRequestSchema().load(body)))
        return 0
    base = args.url.rstrip("/")
    if not _wait_for(f"{base}/healthz", args.wait):
        print(f"No service answered at {base}/healthz within {args.wait:g} s.", file=sys.stderr)
        return 4
    request = urllib.request.Request(
        f"{base}/v1/analyses",
        data=json.dumps(body).encode("utf-8"),
        headers={"Content-Type": "application/json", "Accept": "application/json"},
        method="POST",
    )
    try:
        with urllib.request.urlopen(request, timeout=120) as response:
            _print_json(json.loads(response.read()))
            return 0
    except urllib.error.HTTPError as error:
        print(error.read().decode("utf-8", "replace"), file=sys.stderr)
        return 2 if error.code < 500 else 4
    except (urllib.error.URLError, OSError) as error:
        print(f"The service at {base} could not be reached: {error}.", file=sys.stderr)
        return 4


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of ``heartsway``."""
    parser = argparse.ArgumentParser(
        prog="heartsway",
        description="Heart-health features from body-recoil force traces (not a medical device).",
    )
    commands = parser.add_subparsers(dest="command", required=True)

    serve = commands.add_parser("serve", help="run the REST service under gunicorn")
    serve.add_argument(
        "--host",
        default=_env_default("HEARTSWAY_HOST", "127.0.0.1"),
        help="address to bind (env HEARTSWAY_HOST, default 127.0.0.1)",
    )
    serve.add_argument(
        "--port",
        type=int,
        default=int(_env_default("HEARTSWAY_PORT", "8000")),
        help="port to bind (env HEARTSWAY_PORT, default 8000)",
    )
    serve.add_argument(
        "--workers",
        type=int,
        default=int(_env_default("HEARTSWAY_WORKERS", "2")),
        help="worker processes (env HEARTSWAY_WORKERS, default 2)",
    )
    serve.set_defaults(run=_serve)

    analyze = commands.add_parser("analyze", help="analyse a CSV file, print JSON")
    analyze.add_argument("file", help="CSV: a header row of labels, one column per channel")
    analyze.add_argument("--rate", required=True, help="sampling rate in Hz")
    analyze.add_argument("--quantity", default="force", help="quantity of every column")
    analyze.add_argument("--unit", default="N", help="unit of every column")
    analyze.add_argument("--include", default="", help="comma-separated: beats,windows,...")
    analyze.set_defaults(run=_analyze)

    demo = commands.add_parser("demo", help="analyse the demo armchair trace")
    demo.add_argument("--url", help="send the demo request to this running service instead")
    demo.add_argument(
        "--wait", type=float, default=0.0, help="with --url: seconds to wait for the service"
    )
    demo.add_argument("--request", action="store_true", help="print the request body only")
    demo.set_defaults(run=_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``heartsway`` script."""
    args = build_parser().parse_args(argv)
    return int(args.run(args))


if __name__ == "__main__":
    raise SystemExit(main())
