"""Readers: labels, units and rates from the files' headers, channel selection, errors."""

from __future__ import annotations

import io

import edfio
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from trace_files import LABEL, STEP_N, digital_trace, physical, write_edf, write_wfdb

from fileformats import UnreadableFileError, detect_format, normalise_unit, read_trace
from fileformats.arrays import read_csv
from schemas.csv_input import read_csv_channels


@pytest.fixture(scope="module")
def digital():
    return digital_trace(seed=3)


def test_edf_values_units_and_rate(tmp_path, digital):
    trace = read_trace(write_edf(tmp_path / "a.edf", digital, 100.0))
    assert trace.format == "edf" and trace.fs_hz == 100.0
    assert [c.label for c in trace.channels] == [LABEL]
    assert (trace.channels[0].quantity, trace.channels[0].unit) == ("force", "N")
    assert trace.unit_sources == ("header",)
    # EDF (Kemp et al., Electroencephalogr. Clin. Neurophysiol. 82:391-393, 1992): physical
    # = physical_min + (digital - digital_min) * physical range / digital range.
    np.testing.assert_allclose(trace.channels[0].samples, physical(digital), rtol=0,
                               atol=STEP_N * 1e-6)


def test_wfdb_values_units_and_rate(tmp_path, digital):
    trace = read_trace(write_wfdb(tmp_path, "rec", digital, 100.0))
    assert trace.format == "wfdb" and trace.fs_hz == 100.0
    assert trace.channels[0].unit == "N"
    # WFDB header format (PhysioNet, header(5)): physical = (digital - baseline) / adc_gain.
    np.testing.assert_allclose(trace.channels[0].samples, physical(digital), rtol=0,
                               atol=STEP_N * 1e-6)


def test_wfdb_from_memory_equals_from_disk(tmp_path, digital):
    header = write_wfdb(tmp_path, "rec", digital, 100.0)
    files = {p.name: p.read_bytes() for p in (header, header.with_suffix(".dat"))}
    from_memory = read_trace(files)
    np.testing.assert_array_equal(from_memory.channels[0].samples,
                                  read_trace(header).channels[0].samples)
    with pytest.raises(UnreadableFileError, match="exactly one WFDB header"):
        read_trace({"rec.dat": files["rec.dat"], "x.dat": b""}, format="wfdb")


def test_channel_selection_by_label_and_header_units(tmp_path):
    t = np.arange(3000) / 100.0
    signals = [
        edfio.EdfSignal(700 + np.sin(t), 100.0, label="left", physical_dimension="N",
                        physical_range=(600, 800)),
        edfio.EdfSignal(np.cos(t), 100.0, label="accel", physical_dimension="m/s2",
                        physical_range=(-2, 2)),
        edfio.EdfSignal(np.cos(t), 100.0, label="ecg", physical_dimension="mV",
                        physical_range=(-2, 2)),
        edfio.EdfSignal(np.cos(t[::2]), 50.0, label="slow", physical_dimension="N",
                        physical_range=(-2, 2)),
    ]
    path = tmp_path / "mixed.edf"
    edfio.Edf(signals).write(path)
    trace = read_trace(path, channels=["accel", "left"])
    assert [(c.label, c.quantity, c.unit) for c in trace.channels] == [
        ("accel", "acceleration", "m/s^2"), ("left", "force", "N")]
    with pytest.raises(UnreadableFileError, match=r"`channels` must be labels in the file "
                                                 r"\(accel, ecg, left, slow\); got 'right'"):
        read_trace(path, channels=["right"])
    with pytest.raises(UnreadableFileError, match="header unit 'mV' is not a unit of "
                                                  "acceleration, displacement, force or velocity"):
        read_trace(path, channels=["ecg"])
    assert read_trace(path, channels=["ecg"], unit="g").channels[0].quantity == "acceleration"
    with pytest.raises(UnreadableFileError, match="must share one sampling rate"):
        read_trace(path, channels=["left", "slow"])
    with pytest.raises(UnreadableFileError, match=r"`sampling_rate_hz` must match the rate"):
        read_trace(path, channels=["left"], fs_hz=250.0)


def test_numpy_and_parquet(tmp_path):
    x = np.linspace(0, 1, 2500)
    npz = io.BytesIO()
    np.savez(npz, front=x, back=2 * x, sampling_rate_hz=np.float64(250.0))
    trace = read_trace(npz.getvalue(), name="r.npz")
    assert trace.format == "npz" and trace.fs_hz == 250.0
    assert [c.label for c in trace.channels] == ["front", "back"]
    assert trace.unit_sources == ("default", "default")
    npy = io.BytesIO()
    np.save(npy, np.column_stack([x, x]))
    with pytest.raises(UnreadableFileError, match="`sampling_rate_hz` must be given"):
        read_trace(npy.getvalue())
    assert [c.label for c in read_trace(npy.getvalue(), fs_hz=100).channels] == [
        "channel_1", "channel_2"]
    objects = io.BytesIO()
    np.save(objects, np.array([{"a": 1}], dtype=object))
    with pytest.raises(UnreadableFileError, match="without Python objects"):
        read_trace(objects.getvalue())
    field = pa.field("seat", pa.float64(), metadata={"unit": "kN"})

    def parquet(times: np.ndarray) -> bytes:
        table = pa.table({"time_s": times, "seat": x},
                         schema=pa.schema([pa.field("time_s", pa.float64()), field],
                                          metadata={"sampling_rate_hz": "500"}))
        buffer = io.BytesIO()
        pq.write_table(table, buffer)
        return buffer.getvalue()

    trace = read_trace(parquet(np.arange(x.size) / 500.0))
    assert trace.format == "parquet" and trace.fs_hz == 500.0
    assert [(c.label, c.unit) for c in trace.channels] == [("seat", "kN")]
    # A time column that disagrees with the stated rate (0.4 ms steps at 500 Hz) is refused.
    with pytest.raises(UnreadableFileError, match=r"`time_s` must advance by one sample step "
                                                  r"\(1 / sampling_rate_hz, 2 ms\)") as info:
        read_trace(parquet(x))
    assert info.value.field == "time_s"


def test_csv_reader_matches_the_service_csv_parser():
    text = "time_s,a,b\n0,1.5,2\n0.01,-3e-2,4\n"
    labels, data = read_csv_channels(text)
    raw = read_csv(text.encode())
    assert list(raw.labels) == labels
    np.testing.assert_array_equal(np.column_stack(raw.samples), data)


def test_detection_and_units():
    assert detect_format("x.bin", b"\x93NUMPY\x01\x00") == "npy"
    assert detect_format(None, b"PAR1....") == "parquet"
    assert detect_format("r.EDF", b"0       ABC") == "edf"
    assert detect_format("r.hea", b"r 1 100") == "wfdb"
    with pytest.raises(UnreadableFileError, match="`file` must be one of bdf, csv, edf"):
        detect_format("trace.xyz", b"hello")
    # SI and common spellings (UCUM writes m/s2 and um; the micro sign is common in headers).
    assert [normalise_unit(u) for u in ("N", "m/s2", "\u00b5m", "mV", "", None)] == [
        "N", "m/s^2", "um", None, None, None]
