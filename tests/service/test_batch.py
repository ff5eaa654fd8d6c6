"""heartsway batch: 50 short simulated recordings, locally and on a 2-process Dask
LocalCluster with identical tables; failures recorded per file; resumed after a kill."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

from features.feature_vector import FEATURE_NAMES
from schemas.responses import NOTICE
from service.batch import FIXED_COLUMNS, run_batch
from simulation import SimulationSettings, simulate

ROOT = Path(__file__).resolve().parents[2]
N_RECORDINGS = 50
FS_HZ = 100.0


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """50 recordings of 60 s at 100 Hz as .npz (rate inside), heart rates 55-84 bpm."""
    folder = tmp_path_factory.mktemp("study")
    rates = {}
    for k in range(N_RECORDINGS):
        hr = 55.0 + (k % 30)
        rec = simulate(SimulationSettings(duration_s=60.0, fs_hz=FS_HZ, heart_rate_bpm=hr,
                                          seed=100 + k))
        sub = folder / f"night_{k // 10}"
        sub.mkdir(exist_ok=True)
        path = sub / f"rec_{k:02d}.npz"
        np.savez(path, seat_load=rec.channels[0], sampling_rate_hz=np.float64(FS_HZ))
        rates[str(path)] = hr
    broken = folder / "night_9" / "broken.npz"
    broken.parent.mkdir()
    broken.write_bytes(b"not an archive")
    return folder, rates, broken


def _assert_same_table(a, b):
    left, right = pq.read_table(a).to_pylist(), pq.read_table(b).to_pylist()
    assert len(left) == len(right)
    for x, y in zip(left, right, strict=True):
        differing = [k for k in x if x[k] != y[k]]
        assert not differing, (x["recording"], differing[:5])


def test_an_unusable_signal_is_a_failed_row_of_its_kind(study, monkeypatch):
    # The kind and reason of service/problem_table.py's UnusableSignalError row, the same
    # problem the API answers 422 and `heartsway analyze` exits 3 with.
    import service.analysis
    from features.errors import UnusableSignalError
    from service.batch import analyze_file

    def unusable(*args, **kwargs):
        raise UnusableSignalError("no_occupant", "No one was on the support.")

    monkeypatch.setattr(service.analysis.features, "analyze", unusable)
    path = next(iter(study[1]))
    [row] = analyze_file(path, {})
    assert row["status"] == "failed"
    assert row["error"] == "unusable-signal: no_occupant: No one was on the support."


def test_local_table_has_a_row_per_recording_and_records_failures(study, tmp_path):
    folder, rates, broken = study
    out = tmp_path / "table.parquet"
    summary = run_batch([folder], out, form={}, progress=False)
    assert summary == {"recordings": N_RECORDINGS + 1, "analysed": N_RECORDINGS + 1,
                       "skipped": 0, "failed": 1, "rows": N_RECORDINGS + 1}
    table = pq.read_table(out)
    assert table.column_names == [*FIXED_COLUMNS,
                                  *(c for n in FEATURE_NAMES for c in (n, f"{n}_confidence"))]
    # The caution rides in the Parquet schema metadata, where pyarrow, pandas and Spark
    # show it (Apache Parquet format: FileMetaData.key_value_metadata).
    assert pq.read_schema(out).metadata[b"notice"].decode("utf-8") == NOTICE
    rows = {r["recording"]: r for r in table.to_pylist()}
    assert rows[str(broken)]["status"] == "failed"
    # The kind of service/problem_table.py's row for fileformats.UnreadableFileError.
    assert rows[str(broken)]["error"].startswith("unreadable-file: file: ")
    for path, hr in rates.items():
        assert rows[path]["status"] == "ok"
        # Each value beside its confidence: in [0, 1], and 0 where the value is None
        # (features/feature_vector.py, FeatureValue); a clean trace's heart rate has some.
        for name in FEATURE_NAMES:
            confidence = rows[path][f"{name}_confidence"]
            assert 0.0 <= confidence <= 1.0
            assert rows[path][name] is not None or confidence == 0.0
        assert rows[path]["heart_rate_mean_bpm_confidence"] > 0
        # Simulated at `hr` bpm (simulation settings): the table holds the engine's
        # estimate of it, not a placeholder. 4 bpm: our bound for a 60-s clean simulated
        # trace (common practice for BCG rate agreement; the engine's accuracy is tested
        # in tests/features).
        assert abs(rows[path]["heart_rate_mean_bpm"] - hr) < 4.0, path


def test_dask_cluster_of_two_processes_gives_the_same_table(study, tmp_path):
    from distributed import LocalCluster

    folder, _, _ = study
    local, remote = tmp_path / "local.parquet", tmp_path / "dask.parquet"
    run_batch([folder], local, form={}, progress=False)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=":0", silence_logs=50) as cluster:
        summary = run_batch([folder], remote, form={}, scheduler=cluster.scheduler_address,
                            progress=False)
        workers = len(cluster.workers)
    assert workers == 2
    assert summary["analysed"] == N_RECORDINGS + 1
    _assert_same_table(remote, local)


def test_windows_and_csv_output(study, tmp_path):
    folder, rates, _ = study
    one = next(iter(rates))
    out = tmp_path / "windows.csv"
    run_batch([one], out, form={}, window_s=30.0, progress=False)
    table = pacsv.read_csv(out).to_pylist()
    assert [r["window"] for r in table] == [0, 1]
    assert [r["start_s"] for r in table] == [0.0, 30.0]
    assert all(r["status"] == "ok" for r in table)
    assert all(0.0 < r["heart_rate_mean_bpm_confidence"] <= 1.0 for r in table)
    # The caution in the CSVW sidecar a CSV on the Web processor finds beside the table
    # (W3C "Model for Tabular Data and Metadata on the Web", 5.1.2: {url}-metadata.json),
    # naming the table and every column in order (W3C "Metadata Vocabulary for Tabular Data").
    sidecar = json.loads((tmp_path / "windows.csv-metadata.json").read_text(encoding="utf-8"))
    assert sidecar["@context"] == "http://www.w3.org/ns/csvw"
    assert sidecar["url"] == "windows.csv"
    assert sidecar["dc:description"] == NOTICE
    assert [c["name"] for c in sidecar["tableSchema"]["columns"]] == list(table[0])


def test_a_killed_run_resumes_where_it_stopped(study, tmp_path):
    folder, _, _ = study
    reference = tmp_path / "reference.parquet"
    run_batch([folder], reference, form={}, progress=False)
    out = tmp_path / "resumed.parquet"
    parts = out.with_name(out.name + ".parts")
    command = [sys.executable, "-m", "service.cli", "batch", str(folder), "--out", str(out),
               "--no-progress"]
    process = subprocess.Popen(command, cwd=ROOT, stdout=subprocess.DEVNULL,
                               stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.monotonic() + 60
    while not (parts.exists() and len(list(parts.glob("*.json"))) >= 5):
        assert process.poll() is None and time.monotonic() < deadline, "batch ended early"
        time.sleep(0.01)
    os.killpg(process.pid, signal.SIGKILL)
    process.wait(timeout=10)
    done_before = len(list(parts.glob("*.json")))
    assert 5 <= done_before < N_RECORDINGS + 1
    assert not out.exists()
    again = subprocess.run(command, cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert again.returncode == 0, again.stderr
    summary = json.loads(again.stderr.strip().splitlines()[-1])
    assert summary["skipped"] == done_before
    assert summary["analysed"] == N_RECORDINGS + 1 - done_before
    _assert_same_table(out, reference)
