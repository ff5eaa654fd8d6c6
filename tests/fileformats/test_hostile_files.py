"""Hostile and broken files: every reader answers a trace or an UnreadableFileError, the API
200, 413 or 422 with a problem document, ``analyze`` exit 2 and ``batch`` a failed row.

The mutation counts here are bounded for CI; the full run (500 per format through the API)
is ``python tests/fileformats/fuzz.py --count 500`` and its figures are in the README.
"""

from __future__ import annotations

import json
import subprocess
import sys
from collections import Counter
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from fuzz import FORMATS, api_post, failed, mutants, reader_outcome, valid_files
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchmarks.file_bombs import PARQUET_CODECS, crc32_combine, npz_bomb, parquet_bomb
from features.limits import DEFAULT_MAX_SAMPLES
from fileformats import UnreadableFileError, read_trace
from service import create_app
from service.batch import run_batch
from service.cli import main

REPO = Path(__file__).resolve().parents[2]
#: Mutants per format at the reader layer and through the API (the CI share of the full run).
READER_COUNT = 150
API_COUNT = 20
#: Every answer a file may get: read (200), too large (413), refused (422).
ANSWERS = {200, 413, 422}
PROBLEM = "application/problem+json"
#: 3 GB, the size the issue's acceptance names for a bomb.
BOMB_BYTES = 3_000_000_000
#: Parquet bombs in CI: 64 MiB is 8.4 M float64 samples, past the 4 M default limit; the
#: refusal comes from the same metadata as at 3 GB (benchmarks/file_bombs.py runs those).
PARQUET_CI_BYTES = 64 << 20


@pytest.fixture(scope="module")
def base():
    return valid_files()


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def _codecs():
    return [c for c in PARQUET_CODECS if pa.Codec.is_available(c)]


# -- fuzzing -------------------------------------------------------------------------------

def test_the_valid_files_are_analysed(base, client):
    # The mutants start from files the API accepts: a refusal below is the mutation's doing.
    for fmt in FORMATS:
        response = api_post(client, base[fmt], fmt=fmt)
        assert response.status_code == 200, (fmt, response.get_data(as_text=True)[:300])


@pytest.mark.parametrize("fmt", FORMATS)
def test_mutated_files_are_read_or_refused_never_crash(base, fmt):
    outcomes = Counter(reader_outcome(fmt, files)
                       for files in mutants(fmt, base[fmt], READER_COUNT, seed=0))
    assert not [o for o in outcomes if failed(o)], outcomes
    # A fuzzer whose mutants were all still readable would prove nothing.
    assert outcomes["refused"] >= READER_COUNT // 4, outcomes


@pytest.mark.parametrize("fmt", FORMATS)
def test_mutated_files_through_the_api_answer_problems(base, client, fmt):
    for files in mutants(fmt, base[fmt], API_COUNT, seed=1):
        response = api_post(client, files, fmt=fmt)
        assert response.status_code in ANSWERS, response.get_data(as_text=True)[:300]
        if response.status_code != 200:
            # RFC 9457: a problem document with its media type.
            assert response.mimetype == PROBLEM
            assert response.get_json()["status"] == response.status_code


NAMES = ("trace.csv", "trace.txt", "trace.npy", "trace.npz", "trace.edf", "trace.bdf",
         "trace.parquet", "trace.pq", "trace.hea", "trace.dat", "trace")
#: The first bytes detection looks for (fileformats.reading.detect_format), so arbitrary
#: bytes also reach the binary readers, not only the name's.
HEADS = (b"", b"\x93NUMPY\x01\x00", b"\x93NUMPY\x02\x00", b"PK\x03\x04", b"PAR1",
         b"0       ", b"\xffBIOSEMI", b"trace 1 100 2000\ntrace.dat 16 ")


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(name=st.sampled_from(NAMES), head=st.sampled_from(HEADS),
       tail=st.binary(max_size=4096), with_rate=st.booleans(),
       signal=st.one_of(st.none(), st.binary(max_size=4096)))
def test_any_bytes_under_any_supported_name_answer_200_413_or_422(client, name, head, tail,
                                                                   with_rate, signal):
    files = {name: head + tail}
    if signal is not None and name.endswith(".hea"):
        files["trace.dat"] = signal
    form = {"sampling_rate_hz": "100"} if with_rate else {}
    response = api_post(client, files, form=form)
    assert response.status_code in ANSWERS, response.get_data(as_text=True)[:300]
    if response.status_code != 200:
        assert response.mimetype == PROBLEM


# -- sizes before bytes --------------------------------------------------------------------

def _limit_problem(response, limit):
    assert response.status_code in (413, 422), response.get_data(as_text=True)[:300]
    detail = json.dumps(response.get_json())
    assert str(limit) in detail and "HEARTSWAY_MAX_SAMPLES" in detail, detail


def test_declared_sizes_past_the_limit_are_refused_by_every_format(base):
    # Each valid file holds 2400 samples (24 s at 100 Hz); a limit of 1000 refuses it from
    # what it declares, with the limit named.
    for fmt in FORMATS:
        files = base[fmt]
        source = files if fmt == "wfdb" else next(iter(files.values()))
        with pytest.raises(UnreadableFileError, match=r"at most 1000 samples .* got 2400 declared"):
            read_trace(source, name=next(iter(files)), fs_hz=100.0, max_samples=1000)
        read_trace(source, name=next(iter(files)), fs_hz=100.0, max_samples=2400)


def test_the_service_limit_reaches_the_readers(base):
    client = create_app({"TESTING": True, "HEARTSWAY_MAX_SAMPLES": 1000}).test_client()
    for fmt in FORMATS:
        _limit_problem(api_post(client, base[fmt], fmt=fmt), 1000)


def test_an_edf_header_that_lies_about_its_record_count_is_refused(base):
    data = bytearray(base["edf"]["trace.edf"])
    records = int(data[236:244].decode())
    data[236:244] = str(records + 1).ljust(8).encode()
    # EDF specification (Kemp et al. 1992): the data records follow the header; a count
    # that disagrees with the file's length is refused, never "updated" by the reader.
    with pytest.raises(UnreadableFileError, match="as long as its header declares"):
        read_trace(bytes(data), name="x.edf")


def test_crc32_combine_matches_zlib():
    import zlib

    # zlib's crc32_combine: crc(a + b) from crc(a), crc(b) and len(b) (zlib crc32.c).
    a, b = b"recoil" * 11, bytes(5000) + b"\x01"
    assert crc32_combine(zlib.crc32(a), zlib.crc32(b), len(b)) == zlib.crc32(a + b)


def test_the_npz_bomb_is_a_valid_archive(tmp_path):
    # The builder's archive is well formed: numpy reads a small one back, every value zero.
    with np.load(npz_bomb(tmp_path / "small.npz", 3 << 20)) as archive:
        assert archive["seat"].shape == ((3 << 20) // 8,) and not archive["seat"].any()


@pytest.fixture(scope="module")
def bomb_files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("bombs")
    files = {"npz": npz_bomb(folder / "bomb.npz", BOMB_BYTES),
             "npz_liar": npz_bomb(folder / "liar.npz", BOMB_BYTES, declared_bytes=4096)}
    for codec in _codecs():
        files[codec] = parquet_bomb(folder / f"bomb_{codec}.parquet", PARQUET_CI_BYTES, codec)
    return files


def test_bombs_are_refused_with_a_problem(client, bomb_files):
    for what, path in bomb_files.items():
        response = api_post(client, {path.name: path.read_bytes()})
        assert response.status_code in (413, 422), (what, response.status_code)
        assert response.mimetype == PROBLEM
        if what != "npz_liar":
            _limit_problem(response, DEFAULT_MAX_SAMPLES)


def test_a_bomb_within_the_sample_limit_is_cut_off_by_the_ratio_cap(bomb_files):
    # A job's larger limit (1e9 samples) lets the declared rows pass; the 64-MiB zero column
    # still expands past 200 times its compressed size (fileformats.bounds.MAX_RATIO).
    path = bomb_files["zstd"]
    with pytest.raises(UnreadableFileError, match="must not expand more than 200-fold"):
        read_trace(path.read_bytes(), max_samples=10**9)


def test_parquet_rows_are_counted_over_every_row_group_at_the_limit(tmp_path):
    # The metadata's rows over both row groups (2 x 3000) against the limit, on each side.
    table = pa.table({"seat": np.arange(3000, dtype=np.float64)})
    path = tmp_path / "two.parquet"
    with pq.ParquetWriter(path, table.schema) as writer:
        writer.write_table(table)
        writer.write_table(table)
    with pytest.raises(UnreadableFileError, match="at most 5999 samples"):
        read_trace(path, fs_hz=100.0, max_samples=5999)
    assert read_trace(path, fs_hz=100.0, max_samples=6000).channels[0].samples.size == 6000


def _varint(value, width):
    out = bytearray()
    for k in range(width):
        out.append((value >> (7 * k)) & 0x7F | (0x80 if k < width - 1 else 0))
    return bytes(out)


def test_a_page_header_larger_than_its_footer_is_refused_before_it_is_inflated(tmp_path):
    # One uncompressed page of 20,000 float64 (160 kB); its header's uncompressed_page_size
    # (Thrift compact protocol: field 1 type, field 2 size, zigzag varints) is raised to
    # 1 MB while the footer still says 160 kB. With a limit of 20,000 samples (160 kB of
    # data and 64 KiB of headers) the footer passes and the page header is caught.
    path = tmp_path / "page.parquet"
    pq.write_table(pa.table({"seat": np.arange(20_000, dtype=np.float64)}), path,
                   compression="none", use_dictionary=False)
    data = bytearray(path.read_bytes())
    start = pq.ParquetFile(path).metadata.row_group(0).column(0).data_page_offset
    assert data[start:start + 3] == b"\x15\x00\x15"  # type DATA_PAGE (0), then field 2
    raw = data[start + 3:start + 6]
    size = (raw[0] & 0x7F | (raw[1] & 0x7F) << 7 | raw[2] << 14) // 2  # zigzag(n) = 2n, n >= 0
    # PLAIN float64 is 8 bytes a value (Parquet format, Encodings.md), and a nullable
    # column's definition levels add a few bytes (a length and one RLE run).
    assert raw[2] < 0x80 and 160_000 <= size < 160_100, (bytes(raw), size)
    assert read_trace(bytes(data), fs_hz=100.0, max_samples=20_000).channels
    data[start + 3:start + 6] = _varint(1_000_000 * 2, 3)
    with pytest.raises(UnreadableFileError, match="in its page headers"):
        read_trace(bytes(data), fs_hz=100.0, max_samples=20_000)


def test_a_bomb_is_refused_by_a_fresh_worker_from_its_declared_size(bomb_files):
    # The measuring command itself, in a separate interpreter: the bomb is refused, and by
    # the size its zip directory declares, before anything is inflated. Its memory figure
    # (issue 14: under 100 MB of growth) is judged by `python -m benchmarks.file_bombs`
    # and recorded in the README, not here: a memory threshold belongs in the benchmark.
    done = subprocess.run(
        [sys.executable, "-m", "benchmarks.file_bombs", "--child", str(bomb_files["npz"])],
        capture_output=True, text=True, cwd=REPO, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    figures = json.loads(done.stdout.strip().splitlines()[-1])
    assert figures["status"] in (413, 422)
    assert "HEARTSWAY_MAX_SAMPLES" in figures["detail"], figures


# -- the command line and batch ------------------------------------------------------------

def _refused_files(base, folder):
    """A few refused mutants of every format, and the bombs, on disk: (format, path)."""
    out = []
    for fmt in FORMATS:
        picked = [f for f in mutants(fmt, base[fmt], 40, seed=2)
                  if reader_outcome(fmt, f, fs_hz=100.0) == "refused"][:2]
        for k, files in enumerate(picked):
            sub = folder / f"{fmt}_{k}"
            sub.mkdir()
            for name, content in files.items():
                (sub / name).write_bytes(content)
            out.append((fmt, sub / next(n for n in files if not n.endswith(".dat"))))
    return out


def test_refused_files_exit_2_from_analyze_with_the_problem_on_stderr(base, bomb_files,
                                                                     tmp_path, capsys):
    cases = _refused_files(base, tmp_path) + [(k, p) for k, p in bomb_files.items()]
    assert len(cases) >= 2 * len(FORMATS)
    for what, path in cases:
        assert main(["analyze", str(path), "--rate", "100"]) == 2, what
        captured = capsys.readouterr()
        problem = json.loads(captured.err.strip().splitlines()[-1])
        # The API's RFC 9457 problem (service/problem_table.py's row for UnreadableFileError)
        assert problem["type"] == "tag:heartsway.dev,2026:problem/validation-error", what
        assert problem["errors"][0]["detail"], what
        assert captured.out == ""


def test_refused_files_are_failed_rows_in_a_batch_and_the_others_go_on(base, bomb_files,
                                                                      tmp_path):
    good = tmp_path / "good.npz"
    good.write_bytes(base["npz"]["trace.npz"])
    bad = [p for _, p in _refused_files(base, tmp_path)] + [bomb_files["npz"],
                                                           bomb_files["zstd"]]
    table = tmp_path / "table.parquet"
    summary = run_batch([str(p) for p in [*bad[:3], good, *bad[3:]]], table,
                        form={"sampling_rate_hz": "100"}, progress=False)
    assert summary["failed"] == len(bad) and summary["analysed"] == len(bad) + 1
    rows = {row["recording"]: row for row in pq.read_table(table).to_pylist()}
    assert rows[str(good)]["status"] == "ok"
    for path in bad:
        row = rows[str(path)]
        # A refusal names the field it breaks (file: ...), never a bare exception type.
        assert row["status"] == "failed" and not row["error"].startswith("error:"), row
