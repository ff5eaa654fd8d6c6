"""The ``heartsway`` command line: serve, worker, submit FILE, analyze FILE, batch INPUTS, demo.

``serve`` runs gunicorn on the application factory with the settings of
:mod:`service.gunicorn_conf`, and ``--job-workers`` night-job workers beside it (each
``worker``: :func:`service.job_worker.run_worker`); ``submit`` sends a night to a
service as a job (``--wait`` prints its result); ``analyze`` runs a trace file through the same
schemas and engine call as the API (:func:`service.analysis.analyze_request`) and
prints the same JSON, windows included with ``--window-s``, and with ``--plot`` draws
the report image from that one result; ``demo`` analyses the demo scenario's trace, or
sends it to a running service with ``--url``.

Exit codes (from the one problem table, :mod:`service.problem_table`): 0 success,
2 bad input or an unreadable file, 3 no usable signal, 4 the service could not be
reached, 1 anything else. On 2 and 3 the problem is printed on stderr as the same
RFC 9457 JSON the API answers (without ``request_id``).
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

from service.allocator import tune_allocator

GUNICORN_ARGS = ["--config", "python:service.gunicorn_conf", "service:create_app()"]


def _print_json(document: Any) -> None:
    json.dump(document, sys.stdout, indent=2, allow_nan=False)
    sys.stdout.write("\n")


def _env_default(name: str, default: str) -> str:
    return os.environ.get(name, default)


def _bind(args: argparse.Namespace) -> str:
    """The address gunicorn binds: ``--host``/``--port`` when given, else ``HEARTSWAY_BIND``
    when set (the container's setting, also read by its health check), else
    ``HEARTSWAY_HOST``/``HEARTSWAY_PORT`` (default 127.0.0.1:8000)."""
    if args.host is None and args.port is None and os.environ.get("HEARTSWAY_BIND"):
        return os.environ["HEARTSWAY_BIND"]
    host = args.host if args.host is not None else _env_default("HEARTSWAY_HOST", "127.0.0.1")
    port = args.port if args.port is not None else int(_env_default("HEARTSWAY_PORT", "8000"))
    return f"{host}:{port}"


def _serve(args: argparse.Namespace) -> int:
    env = dict(os.environ)
    env["HEARTSWAY_BIND"] = _bind(args)
    env["HEARTSWAY_WORKERS"] = str(args.workers)
    command = [sys.executable, "-m", "gunicorn", *GUNICORN_ARGS]
    if args.job_workers < 0:
        print(f"`--job-workers` must be 0 or more; got {args.job_workers}.", file=sys.stderr)
        return 2
    if args.job_workers == 0:
        os.execve(sys.executable, command, env)
        return 0  # not reached
    from service.job_store import JobSettings

    JobSettings.from_env(env).data_dir.mkdir(parents=True, exist_ok=True, mode=0o700)
    return _supervise(command, args.job_workers, env)


def _supervise(command: list[str], job_workers: int, env: dict[str, str]) -> int:
    """Run gunicorn and ``job_workers`` job workers; restart a worker that dies; stop all
    on SIGINT/SIGTERM or when gunicorn ends."""
    import signal
    import subprocess

    worker_command = [sys.executable, "-m", "service.cli", "worker"]
    server = subprocess.Popen(command, env=env)
    workers = [subprocess.Popen(worker_command, env=env) for _ in range(job_workers)]
    stopping = False

    def stop(signum: int, frame: object) -> None:
        nonlocal stopping
        stopping = True

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    try:
        while not stopping and server.poll() is None:
            for k, worker in enumerate(workers):
                if worker.poll() is not None:
                    workers[k] = subprocess.Popen(worker_command, env=env)
            time.sleep(0.5)
    finally:
        for process in [server, *workers]:
            if process.poll() is None:
                process.send_signal(signal.SIGTERM)
        for process in [server, *workers]:
            try:
                process.wait(timeout=35)
            except subprocess.TimeoutExpired:
                process.kill()
    return 0 if stopping else int(server.returncode or 0)


def _worker(args: argparse.Namespace) -> int:
    from service.job_worker import run_worker
    from service.logs import configure_logging

    configure_logging(os.environ.get("HEARTSWAY_LOG_LEVEL", "INFO"))
    run_worker()
    return 0


def _submit(args: argparse.Namespace) -> int:
    from client import ApiError, HeartswayClient

    api = HeartswayClient(args.url)
    try:
        job = api.submit(args.file, window_s=args.window_s, window_overlap_s=args.overlap_s,
                         sampling_rate_hz=args.rate, file_format=args.format,
                         channels=[c for c in (args.channels or "").split(",") if c],
                         idempotency_key=args.idempotency_key)
        if not args.wait:
            _print_json(job.document)
            return 0
        job.wait()
        if job.status != "succeeded":
            print(json.dumps(job.document), file=sys.stderr)
            return 1
        _print_json(job.result())
        return 0
    except ApiError as error:
        print(json.dumps(error.problem), file=sys.stderr)
        return 2 if error.status < 500 else 1
    except (urllib.error.URLError, OSError) as error:
        print(f"The service at {args.url} could not be reached ({type(error).__name__}).",
              file=sys.stderr)
        return 4


def _analyze(args: argparse.Namespace) -> int:
    from features.errors import EngineError
    from fileformats import UnreadableFileError
    from schemas.errors import SchemaValidationError
    from schemas.requests import AnalysisRequestSchema
    from service.analysis import ask_for_windows, run_analysis
    from service.problem_table import describe
    from service.uploads import path_request_body

    path = Path(args.file)
    # Format from the content and name (CSV, EDF/BDF, WFDB, .npy/.npz, Parquet).
    form = {"sampling_rate_hz": args.rate, "quantity": args.quantity, "unit": args.unit,
            "channels": args.channels, "format": args.format, "include": args.include or None}
    try:
        if not (path.is_file() or path.with_suffix(".hea").is_file()):
            raise UnreadableFileError(
                "file", f"`file` must be an existing file; got {path.name!r}."
            )
        body = path_request_body(path, form)
        if args.window_s is not None:
            body = ask_for_windows(body, args.window_s, args.overlap_s)
        request = AnalysisRequestSchema().load(body)
        if args.plot:
            from service.report import analysis_with_report

            document, image = analysis_with_report(request, image_format=_plot_format(args.plot))
            Path(args.plot).write_bytes(image)
        else:
            document = run_analysis(request)
    except (SchemaValidationError, EngineError) as error:
        problem = describe(error)
        print(json.dumps(problem.body()), file=sys.stderr)
        return problem.row.exit_code
    _print_json(document)
    return 0


def _batch(args: argparse.Namespace) -> int:
    from service.batch import run_batch

    form = {"sampling_rate_hz": args.rate, "quantity": args.quantity, "unit": args.unit,
            "channels": args.channels, "format": args.format}
    summary = run_batch(args.inputs, args.out, form=form, window_s=args.window_s,
                        overlap_s=args.overlap_s, scheduler=args.scheduler,
                        progress=not args.no_progress)
    print(json.dumps(summary), file=sys.stderr)
    return 0


def _plot_format(path: str) -> str:
    return "svg" if path.lower().endswith(".svg") else "png"


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


def _add_file_commands(commands: Any) -> None:
    """The commands that read trace files: ``submit``, ``analyze`` and ``batch``."""
    submit = commands.add_parser("submit", help="send a night to a service as a job")
    submit.add_argument("file", help="trace file (EDF/BDF read window by window)")
    submit.add_argument("--url", required=True, help="the service, e.g. http://127.0.0.1:8000")
    submit.add_argument("--wait", action="store_true", help="wait and print the result")
    submit.add_argument("--window-s", type=float, default=300.0, help="window length, s")
    submit.add_argument("--overlap-s", type=float, default=0.0, help="window overlap, s")
    submit.add_argument("--rate", type=float, default=None, help="sampling rate, Hz")
    submit.add_argument("--format", default=None, help="file format (default: detected)")
    submit.add_argument("--channels", default=None, help="comma-separated labels")
    submit.add_argument("--idempotency-key", default=None, help="sent as Idempotency-Key")
    submit.set_defaults(run=_submit)

    analyze = commands.add_parser("analyze", help="analyse a trace file, print JSON")
    analyze.add_argument(
        "file", help="CSV (a header row of labels, one column per channel), EDF/BDF, WFDB "
        "(.hea), .npy, .npz or Parquet"
    )
    analyze.add_argument(
        "--rate", default=None, help="sampling rate in Hz (when the file does not carry it)"
    )
    analyze.add_argument(
        "--quantity", default=None, help="quantity of every channel (default: from the unit)"
    )
    analyze.add_argument(
        "--unit", default=None, help="unit of every channel (default: the header's; N for CSV)"
    )
    analyze.add_argument("--channels", default=None, help="comma-separated labels to analyse")
    analyze.add_argument("--format", default=None, help="file format (default: detected)")
    analyze.add_argument("--plot", default=None, help="also write the report image (.png/.svg)")
    analyze.add_argument("--include", default="", help="comma-separated: beats,signals,...")
    analyze.add_argument("--window-s", type=float, default=None,
                         # The bounds stay in features.limits: importing the engine here
                         # would slow every command, `serve` and `--help` included.
                         help="also analyse consecutive windows of S s (within "
                              "features.limits.MIN_WINDOW_S to MAX_WINDOW_S; an S out of "
                              "range is refused with the bounds)")
    analyze.add_argument("--overlap-s", type=float, default=0.0, help="window overlap, s")
    analyze.set_defaults(run=_analyze)

    batch = commands.add_parser("batch", help="analyse many files into one feature table")
    batch.add_argument("inputs", nargs="+", help="trace files and folders (searched recursively)")
    batch.add_argument("--out", required=True, help="the table: .parquet or .csv")
    batch.add_argument("--rate", default=None, help="sampling rate in Hz (files without one)")
    batch.add_argument("--quantity", default=None, help="quantity of every channel")
    batch.add_argument("--unit", default=None, help="unit of every channel")
    batch.add_argument("--channels", default=None, help="comma-separated labels to analyse")
    batch.add_argument("--format", default=None, help="file format (default: detected)")
    batch.add_argument("--window-s", type=float, default=None, help="one row per window of S s")
    batch.add_argument("--overlap-s", type=float, default=0.0, help="window overlap, s")
    batch.add_argument("--scheduler", default=None,
                       help="Dask scheduler address (tcp://host:8786); local when absent")
    batch.add_argument("--no-progress", action="store_true", help="no progress bar")
    batch.set_defaults(run=_batch)


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
        default=None,
        help="address to bind (env HEARTSWAY_HOST, default 127.0.0.1; with neither --host "
             "nor --port, HEARTSWAY_BIND=host:port when set)",
    )
    serve.add_argument(
        "--port",
        type=int,
        default=None,
        help="port to bind (env HEARTSWAY_PORT, default 8000)",
    )
    serve.add_argument(
        "--workers",
        type=int,
        default=int(_env_default("HEARTSWAY_WORKERS", "2")),
        help="worker processes (env HEARTSWAY_WORKERS, default 2)",
    )
    serve.add_argument(
        "--job-workers",
        type=int,
        default=int(_env_default("HEARTSWAY_JOB_WORKERS", "1")),
        help="night-job worker processes beside the API (env HEARTSWAY_JOB_WORKERS, "
             "default 1; 0 for none)",
    )
    serve.set_defaults(run=_serve)

    worker = commands.add_parser(
        "worker", help="run one night-job worker (HEARTSWAY_QUEUE_URL, HEARTSWAY_DATA_DIR)")
    worker.set_defaults(run=_worker)

    _add_file_commands(commands)

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
    tune_allocator()  # before any recording is read (service.allocator)
    args = build_parser().parse_args(argv)
    return int(args.run(args))


if __name__ == "__main__":
    raise SystemExit(main())
