"""Acceptance: EDF, WFDB and CSV files of one recording give the same features through the
command line, the API (multipart upload) and a batch run."""

from __future__ import annotations

import io
import json
import math

import pyarrow.parquet as pq
import pytest
from trace_files import LABEL, digital_trace, physical, write_csv, write_edf, write_wfdb
from werkzeug.datastructures import FileStorage, MultiDict
from werkzeug.test import encode_multipart

from features.feature_vector import FEATURE_NAMES
from service import create_app
from service.batch import run_batch
from service.cli import main

FS_HZ = 100.0
#: The simulator's default heart rate (simulation.SimulationSettings), bpm.
SIMULATED_HR_BPM = 68.0


@pytest.fixture(scope="module")
def recordings(tmp_path_factory):
    folder = tmp_path_factory.mktemp("formats")
    digital = digital_trace(seed=11)
    return {
        "edf": write_edf(folder / "evening.edf", digital, FS_HZ),
        "wfdb": write_wfdb(folder, "evening_w", digital, FS_HZ),
        "csv": write_csv(folder / "evening.csv", physical(digital), [LABEL]),
    }


def _api(client, path):
    parts = [path] if path.suffix != ".hea" else [path, path.with_suffix(".dat")]
    values = MultiDict([("sampling_rate_hz", str(FS_HZ))])
    for part in parts:
        values.add("file", FileStorage(stream=io.BytesIO(part.read_bytes()), filename=part.name,
                                       content_type="application/octet-stream"))
    boundary, data = encode_multipart(values)
    response = client.post("/v1/analyses", data=data,
                           content_type=f"multipart/form-data; boundary={boundary}")
    assert response.status_code == 200, response.get_data(as_text=True)
    return {f["name"]: f["value"] for f in response.get_json()["feature_vector"]["features"]}


def _cli(path, capsys):
    assert main(["analyze", str(path), "--rate", str(FS_HZ)]) == 0
    document = json.loads(capsys.readouterr().out)
    return {f["name"]: f["value"] for f in document["feature_vector"]["features"]}


def _same(a, b):
    assert a.keys() == b.keys()
    for name in a:
        if a[name] is None or b[name] is None:
            assert a[name] is None and b[name] is None, name
        else:
            # The readers scale 16-bit values by different formulas (EDF: physical range over
            # digital range; WFDB: (d - baseline) / gain), so the samples may differ in the
            # last bits; the features must agree to rounding.
            assert math.isclose(a[name], b[name], rel_tol=1e-9, abs_tol=1e-9), name


def test_edf_wfdb_and_csv_agree_through_cli_api_and_batch(recordings, tmp_path, capsys):
    client = create_app({"TESTING": True}).test_client()
    table_path = tmp_path / "table.parquet"
    summary = run_batch([str(p) for p in recordings.values()], table_path,
                        form={"sampling_rate_hz": str(FS_HZ)}, progress=False)
    assert summary == {"recordings": 3, "analysed": 3, "skipped": 0, "failed": 0, "rows": 3}
    table = pq.read_table(table_path).to_pylist()
    batch = {row["recording"]: {n: row[n] for n in FEATURE_NAMES} for row in table}

    reference = _api(client, recordings["csv"])
    # The trace is simulated at 68 bpm (the simulator's defaults): a check that the
    # files were read as a heartbeat, not as noise.
    assert abs(reference["heart_rate_mean_bpm"] - SIMULATED_HR_BPM) < 3.0
    assert sum(v is not None for v in reference.values()) > 30
    for path in recordings.values():
        _same(_api(client, path), reference)
        _same(_cli(path, capsys), reference)
        _same(batch[str(path)], reference)
