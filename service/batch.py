"""``heartsway batch``: many recordings into one feature table, locally or on a Dask cluster.

Every input file goes the same road as an upload to the API (:mod:`service.uploads`,
the request schema, :func:`service.analysis.analyze_request`), so a recording gets the
same features in the table as from ``POST /v1/analyses`` or ``heartsway analyze``; the
rows are read from the result's feature vector (or its windows' vectors).

The table has one row per recording (or per window with ``--window-s``): ``recording``
(the path as found), ``window``, ``start_s``, ``end_s``, ``status`` (``ok`` or
``failed``), ``error`` (the field or reason and the message of a failure),
``feature_set_version``, then for each feature of the feature vector
(``features.FEATURES``, in catalogue order) its value (empty where it is None) and
its confidence in [0, 1] (``<feature>_confidence``; 0 where the value is None). It is
written as Parquet (``.parquet``) or CSV (``.csv``).

The caution (not a medical device, not a diagnosis) travels with the table where
table tools read metadata: in the Parquet file's schema metadata under ``notice``;
for CSV, in a sidecar ``<TABLE>-metadata.json`` in the W3C CSV on the Web metadata
vocabulary (W3C Recommendation "Metadata Vocabulary for Tabular Data", 2015: the
table's ``dc:description`` and each column's ``titles``), the file a CSVW processor
looks for beside ``<TABLE>`` (W3C "Model for Tabular Data and Metadata on the Web",
section 5.1.2). A comment line in the CSV itself would break readers that do not
skip comments (pyarrow, DuckDB's defaults).

Resuming: each finished recording's rows are written at once, atomically, to
``<TABLE>.parts/`` (one JSON file per recording). A run started again with the same
``--out`` skips the recordings already there, so a run that was killed goes on from
where it stopped; the table is assembled from the parts at the end, in input order.
"""

from __future__ import annotations

import hashlib
import json
import os
import sys
from collections.abc import Iterable, Iterator, Sequence
from pathlib import Path
from typing import Any

#: Suffixes taken from folders (a WFDB record by its header; .dat files are its data).
TRACE_SUFFIXES = (".bdf", ".csv", ".edf", ".hea", ".npy", ".npz", ".parquet", ".pq")
FIXED_COLUMNS = ("recording", "window", "start_s", "end_s", "status", "error",
                 "feature_set_version")


#: Suffix of a feature's confidence column.
CONFIDENCE_SUFFIX = "_confidence"
#: Key of the caution in the Parquet schema metadata.
NOTICE_KEY = "notice"


def feature_names() -> tuple[str, ...]:
    """The features, in catalogue order."""
    from features.feature_vector import FEATURE_NAMES

    return FEATURE_NAMES


def feature_columns() -> tuple[str, ...]:
    """The columns after the fixed ones: each feature, then its confidence."""
    return tuple(c for name in feature_names() for c in (name, name + CONFIDENCE_SUFFIX))


def _feature_cells(features: Iterable[Any]) -> dict[str, float | None]:
    """Value and confidence columns of feature-vector entries (``FeatureValue``, whose
    values are finite or None already)."""
    cells: dict[str, float | None] = {}
    for f in features:
        cells[f.name] = f.value
        cells[f.name + CONFIDENCE_SUFFIX] = f.confidence
    return cells


def find_inputs(inputs: Sequence[str | Path], *, exclude: Iterable[Path] = ()) -> list[Path]:
    """Files named, and trace files found (recursively, sorted) in folders named.

    Parameters
    ----------
    inputs
        Files and folders, in the order given; a file is kept whatever its suffix.
    exclude
        Paths never taken (the output table and its parts).

    Returns
    -------
    list of Path
        Each file once, in order: named files as given, folder contents sorted.
    """
    skip = {p.resolve() for p in exclude}
    found: list[Path] = []
    for item in map(Path, inputs):
        if item.is_dir():
            candidates = sorted(p for p in item.rglob("*")
                                if p.is_file() and p.suffix.lower() in TRACE_SUFFIXES)
        else:
            candidates = [item]
        for path in candidates:
            if path.resolve() in skip or any(parent.resolve() in skip for parent in path.parents):
                continue
            if path not in found:
                found.append(path)
    return found


def _failure(recording: str, error: Exception) -> list[dict[str, Any]]:
    from service.problem_table import describe

    return [{"recording": recording, "window": None, "start_s": None, "end_s": None,
             "status": "failed", "error": describe(error).short()[:500],
             "feature_set_version": None}]


def analyze_file(path: str, form: dict[str, Any], window_s: float | None = None,
                 overlap_s: float = 0.0) -> list[dict[str, Any]]:
    """The table rows of one recording; a failure is a row, never an exception.

    Parameters
    ----------
    path
        The file (a WFDB record by its ``.hea``).
    form
        The same fields as a multipart upload: ``sampling_rate_hz``, ``channels``,
        ``quantity``, ``unit``, ``format`` (None or absent: from the file).
    window_s, overlap_s
        Analyse in windows of this length, s (the request's ``options.window_s`` and
        ``options.window_overlap_s``); the whole recording at once when None.

    Returns
    -------
    list of dict
        One row (or one per window), with every feature column.
    """
    from schemas.requests import AnalysisRequestSchema
    from service.allocator import tune_allocator
    from service.analysis import analyze_request, analyze_request_windows, ask_for_windows
    from service.uploads import path_request_body

    tune_allocator()  # once per process: a Dask worker's first recording sets it
    columns = feature_columns()
    try:
        body = path_request_body(path, form)
        if window_s is None:
            result = analyze_request(AnalysisRequestSchema().load(body))
        else:
            # Only the windows: the table has no row for the whole recording.
            body = ask_for_windows(body, window_s, overlap_s)
            windowed = analyze_request_windows(AnalysisRequestSchema().load(body))
    except Exception as error:  # noqa: BLE001 - one bad file must not stop the batch
        # The row's `error`: the kind from the problem table, the field or reason, the message.
        return _failure(path, error)
    if window_s is None:
        vector = result.feature_vector
        cells = _feature_cells(vector.features)
        row = {"recording": path, "window": None, "start_s": 0.0,
               "end_s": result.input.duration_s, "status": "ok", "error": None,
               "feature_set_version": vector.feature_set_version}
        return [{**row, **{column: cells.get(column) for column in columns}}]
    rows = []
    for window in windowed.windows:
        row = {"recording": path, "window": window.index, "start_s": window.start_s,
               "end_s": window.end_s, "feature_set_version": windowed.feature_set_version}
        if window.error is not None or window.feature_vector is None:
            detail = window.error.code + ": " + window.error.message if window.error else ""
            row.update(status="failed", error=detail[:500])
            row.update({column: None for column in columns})
        else:
            row.update(status="ok", error=None)
            cells = _feature_cells(window.feature_vector.features)
            row.update({column: cells.get(column) for column in columns})
        rows.append(row)
    return rows


class PartStore:
    """Finished recordings' rows, one JSON file each, under ``<TABLE>.parts/``."""

    def __init__(self, table: Path) -> None:
        self.folder = table.with_name(table.name + ".parts")
        self.folder.mkdir(parents=True, exist_ok=True)

    def _path(self, recording: str) -> Path:
        digest = hashlib.sha256(recording.encode("utf-8")).hexdigest()[:32]
        return self.folder / f"{digest}.json"

    def has(self, recording: str) -> bool:
        return self._path(recording).exists()

    def put(self, recording: str, rows: list[dict[str, Any]]) -> None:
        """Write atomically: a killed run leaves either the whole part or none."""
        target = self._path(recording)
        temporary = target.with_suffix(f".{os.getpid()}.tmp")
        temporary.write_text(json.dumps({"recording": recording, "rows": rows},
                                        allow_nan=False), encoding="utf-8")
        os.replace(temporary, target)

    def get(self, recording: str) -> list[dict[str, Any]]:
        document = json.loads(self._path(recording).read_text(encoding="utf-8"))
        rows: list[dict[str, Any]] = document["rows"]
        return rows


def csv_metadata(out: Path) -> dict[str, Any]:
    """The CSVW metadata document of the CSV table ``out``: the caution and the columns."""
    from schemas.responses import NOTICE

    columns: list[dict[str, Any]] = [{"name": c, "titles": c} for c in FIXED_COLUMNS]
    for name in feature_names():
        columns.append({"name": name, "titles": name, "dc:description":
                        f"Value of the feature {name} (catalogue: GET /v1/features)."})
        confidence = name + CONFIDENCE_SUFFIX
        columns.append({"name": confidence, "titles": confidence,
                        "dc:description": f"Confidence in [0, 1] of {name}."})
    return {"@context": "http://www.w3.org/ns/csvw", "url": out.name,
            "dc:description": NOTICE, "tableSchema": {"columns": columns}}


def write_table(rows: list[dict[str, Any]], out: Path) -> None:
    """Write the rows as Parquet (``.parquet``/``.pq``) or CSV (anything else), columns fixed.

    The caution goes into the Parquet schema metadata (``notice``), or for CSV into
    the sidecar ``<out>-metadata.json`` (:func:`csv_metadata`); see the module docstring.
    """
    import pyarrow as pa

    from schemas.responses import NOTICE

    columns: dict[str, Any] = {
        "recording": pa.array([r["recording"] for r in rows], pa.string()),
        "window": pa.array([r["window"] for r in rows], pa.int64()),
        "start_s": pa.array([r["start_s"] for r in rows], pa.float64()),
        "end_s": pa.array([r["end_s"] for r in rows], pa.float64()),
        "status": pa.array([r["status"] for r in rows], pa.string()),
        "error": pa.array([r["error"] for r in rows], pa.string()),
        "feature_set_version": pa.array([r["feature_set_version"] for r in rows], pa.string()),
    }
    for column in feature_columns():
        columns[column] = pa.array([r.get(column) for r in rows], pa.float64())
    table = pa.table(columns).replace_schema_metadata({NOTICE_KEY: NOTICE})
    temporary = out.with_name(out.name + ".tmp")
    if out.suffix.lower() in (".parquet", ".pq"):
        import pyarrow.parquet as pq

        pq.write_table(table, temporary)
    else:
        import pyarrow.csv as pacsv

        sidecar = out.with_name(out.name + "-metadata.json")
        sidecar_temporary = sidecar.with_name(sidecar.name + ".tmp")
        sidecar_temporary.write_text(json.dumps(csv_metadata(out), indent=2), encoding="utf-8")
        os.replace(sidecar_temporary, sidecar)
        pacsv.write_csv(table, temporary)
    os.replace(temporary, out)


def _local(todo: list[str], task: dict[str, Any]) -> Iterator[tuple[str, list[dict[str, Any]]]]:
    for path in todo:
        yield path, analyze_file(path, **task)


def _dask(todo: list[str], task: dict[str, Any],
          address: str) -> Iterator[tuple[str, list[dict[str, Any]]]]:
    from distributed import Client, as_completed

    with Client(address) as client:
        futures = {client.submit(analyze_file, path, pure=False, **task): path for path in todo}
        for future in as_completed(futures):
            yield futures[future], future.result()
            future.release()


def run_batch(inputs: Sequence[str | Path], out: str | Path, *, form: dict[str, Any],
              window_s: float | None = None, overlap_s: float = 0.0,
              scheduler: str | None = None, progress: bool = True) -> dict[str, int]:
    """Analyse every input into the table ``out``; see the module docstring.

    Parameters
    ----------
    inputs
        Files and folders.
    out
        The table, ``.parquet`` or ``.csv``.
    form
        Upload fields applied to every file (see :func:`analyze_file`).
    window_s, overlap_s
        Windowed analysis, s; whole recordings when ``window_s`` is None.
    scheduler
        Address of a Dask distributed scheduler (``tcp://host:8786``); local when None.
    progress
        Show a progress bar (tqdm, on standard error).

    Returns
    -------
    dict
        ``recordings``, ``analysed`` (this run), ``skipped`` (done by an earlier run),
        ``failed`` (recordings with a failed row), ``rows``.
    """
    out = Path(out)
    store = PartStore(out)
    paths = [str(p) for p in find_inputs(inputs, exclude=[out, store.folder])]
    todo = [p for p in paths if not store.has(p)]
    task = {"form": form, "window_s": window_s, "overlap_s": overlap_s}
    results = _dask(todo, task, scheduler) if scheduler else _local(todo, task)
    from tqdm import tqdm

    bar = tqdm(total=len(paths), initial=len(paths) - len(todo), unit="file",
               disable=not progress, file=sys.stderr, dynamic_ncols=True)
    with bar:
        for path, rows in results:
            store.put(path, rows)
            bar.update(1)
    rows = [row for p in paths for row in store.get(p)]
    write_table(rows, out)
    failed = len({r["recording"] for r in rows if r["status"] != "ok"})
    return {"recordings": len(paths), "analysed": len(todo), "skipped": len(paths) - len(todo),
            "failed": failed, "rows": len(rows)}
