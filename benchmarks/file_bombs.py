"""Decompression bombs through ``POST /v1/analyses``: answer, latency and the worker's peak memory.

Run: ``python -m benchmarks.file_bombs [--gb 3] [--body-mib 32]``. Writes one NPZ bomb
(a float64 array of zeros, deflated) and one Parquet bomb per codec pyarrow offers
(zstd, snappy, gzip, brotli, lz4: PLAIN encoding, no dictionary, so the pages themselves
expand), each expanding to ``--gb`` GB, plus an NPZ whose zip directory understates its
member (it declares a few kB and inflates to ``--gb`` GB). Each is posted in a fresh
interpreter, as a worker would receive it, after one warm-up analysis of a small valid
file; the child resets its peak resident size (``/proc/self/clear_refs``) just before
the bomb's request and reports ``VmHWM`` minus ``VmRSS`` at that moment, the answer's
status and problem, and the seconds the request took. Prints one JSON line per bomb.

The body limit is the service's (``HEARTSWAY_MAX_BODY_BYTES``, 32 MiB by default):
snappy cannot compress beyond about 21:1, so its 3-GB bomb is larger than the body
limit and gets 413 before any reader runs; ``--body-mib 1024`` (the size the jobs
upload will take) sends it to the reader too, and then the body itself is in memory.
``--max-samples`` raises the sample limit (as a job's may), so that the declared sizes
pass and the byte and ratio caps answer.
"""

from __future__ import annotations

import argparse
import io
import json
import struct
import subprocess
import sys
import tempfile
import time
import zlib
from pathlib import Path

import numpy as np

#: The codecs a bomb is built with, where pyarrow has them.
PARQUET_CODECS = ("brotli", "gzip", "lz4", "snappy", "zstd")
_BLOCK = 1 << 20


# -- zlib's crc32_combine (zlib crc32.c, "gf2_matrix" method), for a CRC of many zeros --------

def _gf2_times(matrix: list[int], vector: int) -> int:
    out, k = 0, 0
    while vector:
        if vector & 1:
            out ^= matrix[k]
        vector >>= 1
        k += 1
    return out


def _gf2_square(matrix: list[int]) -> list[int]:
    return [_gf2_times(matrix, matrix[n]) for n in range(32)]


def crc32_combine(crc1: int, crc2: int, length2: int) -> int:
    """CRC-32 of A + B from CRC-32 of A, of B, and B's length (zlib's crc32_combine)."""
    if length2 <= 0:
        return crc1
    # The operator that appends one zero bit to a CRC, squared twice: four zero bits.
    operator = _gf2_square(_gf2_square([0xEDB88320] + [1 << n for n in range(31)]))
    while length2:
        operator = _gf2_square(operator)  # 2^k zero bytes at the k-th pass
        if length2 & 1:
            crc1 = _gf2_times(operator, crc1)
        length2 >>= 1
    return crc1 ^ crc2


def _crc_of_blocks(block_crc: int, blocks: int) -> int:
    """CRC-32 of ``blocks`` copies of one block of _BLOCK bytes (by doubling)."""
    total, power, length = 0, block_crc, _BLOCK
    first = True
    while blocks:
        if blocks & 1:
            total = power if first else crc32_combine(total, power, length)
            first = False
        blocks >>= 1
        if blocks:
            power = crc32_combine(power, power, length)
            length *= 2
    return total


def npz_bomb(path: Path, expanded_bytes: int, *, declared_bytes: int | None = None) -> Path:
    """An .npz whose one member, ``seat.npy``, is a float64 array of zeros of about
    ``expanded_bytes`` bytes, deflated.

    The deflate stream repeats one fully flushed block of 1 MiB of zeros (a full flush
    resets the history, so the repeats are a valid stream), so the file is written in
    milliseconds; the CRC is computed with zlib's ``crc32_combine``. ``declared_bytes``
    writes another uncompressed size (and shape) into the zip directory and NPY header:
    a directory that lies. Sizes stay below 4 GiB (no zip64 records).
    """
    blocks = max(1, expanded_bytes // _BLOCK)
    samples = blocks * _BLOCK // 8
    stated = samples if declared_bytes is None else declared_bytes // 8
    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(
        header, {"descr": "<f8", "fortran_order": False, "shape": (stated,)})
    head = header.getvalue()
    first = zlib.compressobj(9, zlib.DEFLATED, -15)
    start = first.compress(head) + first.flush(zlib.Z_FULL_FLUSH)
    repeat = zlib.compressobj(9, zlib.DEFLATED, -15)
    block = repeat.compress(bytes(_BLOCK)) + repeat.flush(zlib.Z_FULL_FLUSH)
    end = zlib.compressobj(9, zlib.DEFLATED, -15).flush(zlib.Z_FINISH)
    compressed = len(start) + blocks * len(block) + len(end)
    size = len(head) + blocks * _BLOCK
    crc = crc32_combine(zlib.crc32(head), _crc_of_blocks(zlib.crc32(bytes(_BLOCK)), blocks),
                        blocks * _BLOCK)
    directory_size = size if declared_bytes is None else len(head) + declared_bytes
    name = b"seat.npy"
    # PKWARE APPNOTE.TXT 4.3.7 (local file header) and 4.3.12 (central directory header).
    fields = struct.pack("<HHHHHIII", 20, 0, 8, 0, 0x21, crc, compressed, directory_size)
    with path.open("wb") as out:
        out.write(b"PK\x03\x04" + fields + struct.pack("<HH", len(name), 0) + name)
        out.write(start)
        for _ in range(blocks):
            out.write(block)
        out.write(end)
        directory_at = out.tell()
        central = (b"PK\x01\x02" + struct.pack("<H", 20) + fields
                   + struct.pack("<HHHHHII", len(name), 0, 0, 0, 0, 0, 0) + name)
        out.write(central)
        out.write(b"PK\x05\x06" + struct.pack("<HHHHIIH", 0, 0, 1, 1, len(central),
                                              directory_at, 0))
    return path


def parquet_bomb(path: Path, expanded_bytes: int, codec: str) -> Path:
    """A Parquet file of one float64 column of zeros, PLAIN-encoded (no dictionary), whose
    pages expand to about ``expanded_bytes`` bytes, compressed with ``codec``."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    rows = 1 << 20
    table = pa.table({"seat": np.zeros(rows)},
                     schema=pa.schema([pa.field("seat", pa.float64())],
                                      metadata={"sampling_rate_hz": "100"}))
    with pq.ParquetWriter(path, table.schema, compression=codec, use_dictionary=False,
                          column_encoding={"seat": "PLAIN"}) as writer:
        for _ in range(max(1, expanded_bytes // (rows * 8))):
            writer.write_table(table, row_group_size=rows)
    return path


# -- one bomb in a fresh interpreter ------------------------------------------------------

def _status_kb(key: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    raise KeyError(key)


def _multipart(name: str, data: bytes, form: dict[str, str]) -> tuple[bytes, str]:
    from werkzeug.datastructures import FileStorage, MultiDict
    from werkzeug.test import encode_multipart

    values = MultiDict(list(form.items()))
    values.add("file", FileStorage(stream=io.BytesIO(data), filename=name,
                                   content_type="application/octet-stream"))
    boundary, body = encode_multipart(values)
    return body, f"multipart/form-data; boundary={boundary}"


def _child(path: str, body_mib: int, max_samples: int | None) -> dict[str, object]:
    from service import create_app
    from simulation import SimulationSettings, simulate

    config: dict[str, object] = {"MAX_CONTENT_LENGTH": body_mib << 20,
                                 "MAX_FORM_MEMORY_SIZE": body_mib << 20}
    if max_samples is not None:
        config["HEARTSWAY_MAX_SAMPLES"] = max_samples
    app = create_app(config)
    client = app.test_client()
    warm = io.BytesIO()
    trace = simulate(SimulationSettings(duration_s=30.0, fs_hz=100.0, seed=1)).channels[0]
    np.savez_compressed(warm, seat=trace, sampling_rate_hz=np.float64(100.0))
    body, content_type = _multipart("warm.npz", warm.getvalue(), {})
    assert client.post("/v1/analyses", data=body, content_type=content_type).status_code == 200
    import pyarrow.parquet  # noqa: F401 - loaded before the measurement, as in a warm worker

    # The request as it arrives (the test client's copy of it is not the worker's doing).
    body, content_type = _multipart(Path(path).name, Path(path).read_bytes(), {})
    Path("/proc/self/clear_refs").write_text("5")  # Linux: reset VmHWM to the current RSS
    before = _status_kb("VmRSS")
    started = time.perf_counter()
    response = client.post("/v1/analyses", data=body, content_type=content_type)
    seconds = time.perf_counter() - started
    growth = _status_kb("VmHWM") - before
    document = response.get_json(silent=True) or {}  # type: ignore[attr-defined]
    errors = document.get("errors") or [{}]
    return {"status": response.status_code,  # type: ignore[attr-defined]
            "seconds": round(seconds, 3), "peak_growth_mb": round(growth / 1024, 1),
            "rss_before_mb": round(before / 1024, 1),
            "detail": str(errors[0].get("detail") or document.get("detail"))[:160]}


def measure(path: Path, body_mib: int, max_samples: int | None) -> dict[str, object]:
    """Post one bomb in a fresh interpreter; its figures."""
    limit = [] if max_samples is None else ["--max-samples", str(max_samples)]
    done = subprocess.run(
        [sys.executable, "-m", "benchmarks.file_bombs", "--child", str(path),
         "--body-mib", str(body_mib), *limit],
        capture_output=True, text=True, check=True, cwd=Path(__file__).resolve().parents[1])
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def bombs(folder: Path, expanded_bytes: int) -> list[tuple[str, Path]]:
    """Every bomb: (description, file)."""
    import pyarrow as pa

    out = [("npz deflate", npz_bomb(folder / "bomb.npz", expanded_bytes)),
           ("npz deflate, directory says 4 kB",
            npz_bomb(folder / "liar.npz", expanded_bytes, declared_bytes=4096))]
    for codec in PARQUET_CODECS:
        if pa.Codec.is_available(codec):
            out.append((f"parquet {codec}",
                        parquet_bomb(folder / f"bomb_{codec}.parquet", expanded_bytes, codec)))
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--gb", type=float, default=3.0, help="expanded size of each bomb, GB")
    parser.add_argument("--body-mib", type=int, default=32, help="the service's body limit")
    parser.add_argument("--max-samples", type=int, default=None,
                        help="the service's HEARTSWAY_MAX_SAMPLES (its default when absent)")
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        print(json.dumps(_child(args.child, args.body_mib, args.max_samples)))
        return 0
    with tempfile.TemporaryDirectory() as folder:
        for what, path in bombs(Path(folder), int(args.gb * 1e9)):
            figures = measure(path, args.body_mib, args.max_samples)
            print(json.dumps({"bomb": what, "file_bytes": path.stat().st_size,
                              "expands_to_bytes": int(args.gb * 1e9), **figures}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
