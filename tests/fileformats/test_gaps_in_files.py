"""Lost samples and time columns in trace files: NaN, nulls, empty cells, WFDB's invalid
value and ``time_s`` columns become gaps on a uniform grid; infinity stays refused."""

from __future__ import annotations

import io

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from trace_files import STEP_N, digital_trace, physical, write_wfdb

from fileformats import UnreadableFileError, read_trace
from schemas.csv_input import csv_request_body

FS = 100.0


def _csv(times: np.ndarray | None, values: list[str]) -> str:
    header = "time_s,seat" if times is not None else "seat"
    rows = [v if times is None else f"{t:.6f},{v}" for t, v in
            zip(times if times is not None else values, values, strict=True)]
    return "\n".join([header, *rows]) + "\n"


def test_wfdb_invalid_sample_value_reads_as_a_lost_sample(tmp_path) -> None:
    digital = digital_trace(seed=4, duration_s=30.0)
    digital[[10, 11, 500]] = -32768
    # WFDB signal(5) man page (PhysioNet): in format 16 the value -32768 marks an invalid
    # sample; wfdb-python reads it as NaN in the physical signal.
    trace = read_trace(write_wfdb(tmp_path, "rec", digital, FS))
    x = trace.channels[0].samples
    assert np.flatnonzero(np.isnan(x)).tolist() == [10, 11, 500]
    keep = ~np.isnan(x)
    # WFDB header format (PhysioNet, header(5)): physical = (digital - baseline) / adc_gain.
    np.testing.assert_allclose(x[keep], physical(digital)[keep], rtol=0, atol=STEP_N * 1e-6)


def test_parquet_nulls_and_npy_nan_are_lost_samples() -> None:
    values = pa.array([1.0, None, 3.0, 4.0], type=pa.float64())
    counts = pa.array([1, 2, None, 4], type=pa.int32())
    buffer = io.BytesIO()
    pq.write_table(pa.table({"a": values, "b": counts}), buffer)
    trace = read_trace(buffer.getvalue(), fs_hz=FS)
    assert [np.isnan(c.samples).tolist() for c in trace.channels] == [
        [False, True, False, False], [False, False, True, False]]
    npy = io.BytesIO()
    np.save(npy, np.array([1.0, np.nan, 2.0], dtype=np.float32))
    assert np.isnan(read_trace(npy.getvalue(), fs_hz=FS).channels[0].samples).tolist() == [
        False, True, False]


def test_infinity_in_a_file_is_still_refused() -> None:
    npy = io.BytesIO()
    np.save(npy, np.array([1.0, 2.0, np.inf]))
    with pytest.raises(UnreadableFileError, match=r"must not hold infinity .* at index 2"):
        read_trace(npy.getvalue(), fs_hz=FS)


def test_npz_time_member_gives_the_rate_and_places_a_jump() -> None:
    t = np.delete(np.arange(3000) / 250.0, [100, 101])  # 2 samples lost after row 99
    npz = io.BytesIO()
    np.savez(npz, seat=np.ones(t.size), time_s=t)
    trace = read_trace(npz.getvalue())
    # The rate from the column: 2999 sample steps over 11.996 s (float division).
    assert trace.fs_hz == pytest.approx(250.0, rel=1e-12)
    assert [c.label for c in trace.channels] == ["seat"]
    assert np.flatnonzero(np.isnan(trace.channels[0].samples)).tolist() == [100, 101]


def test_csv_empty_cell_is_a_lost_sample_on_both_roads() -> None:
    text = _csv(None, ["1.5", "", "2.5", " ", "3"])
    body = csv_request_body(text, {"sampling_rate_hz": "100"})
    library = read_trace(text.encode(), format="csv", fs_hz=FS)
    for x in (body["channels"][0]["samples"], library.channels[0].samples):
        assert np.isnan(x).tolist() == [False, True, False, True, False]


def test_csv_time_column_gives_the_rate_and_a_two_sample_jump_is_a_gap() -> None:
    t = np.delete(np.arange(2500) / FS, [40, 41])
    text = _csv(t, ["1"] * t.size)
    body = csv_request_body(text, {})  # no sampling_rate_hz form field
    # 2499 sample steps over 24.99 s; rtol: the stamps are printed to the microsecond.
    assert body["sampling_rate_hz"] == pytest.approx(FS, rel=1e-6)
    x = body["channels"][0]["samples"]
    assert x.size == 2500 and np.flatnonzero(np.isnan(x)).tolist() == [40, 41]
    library = read_trace(text.encode(), format="csv")
    assert library.fs_hz == pytest.approx(FS, rel=1e-6)
    np.testing.assert_array_equal(np.isnan(library.channels[0].samples), np.isnan(x))


def test_csv_irregular_time_column_is_a_clear_error() -> None:
    rng = np.random.default_rng(8)
    t = np.cumsum(rng.uniform(0.008, 0.012, 2500))  # steps vary by +-20 %
    text = _csv(t, ["1"] * t.size)
    with pytest.raises(Exception, match=r"`time_s` must advance by one sample step \(the "
                                        r"median step, .* ms\) within 1%") as info:
        csv_request_body(text, {})
    assert "file" in info.value.messages_dict  # type: ignore[attr-defined]
    with pytest.raises(UnreadableFileError, match=r"`time_s` must advance") as lib:
        read_trace(text.encode(), format="csv")
    assert lib.value.field == "time_s"


def test_csv_without_rate_or_time_column_names_both() -> None:
    with pytest.raises(Exception, match=r"`sampling_rate_hz` must be given for a CSV file "
                                        r"without a `time_s` column"):
        csv_request_body(_csv(None, ["1"] * 10), {})
