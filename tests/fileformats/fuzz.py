"""A seeded mutation fuzzer of the file readers: broken and hostile copies of valid files.

Each format starts from one small valid file (a simulated 24-s trace at 100 Hz, a little
longer than the engine's shortest recording of 20 s so that a truncated copy may still be
analysed; written by ``trace_files``), and each mutant applies one to
three of: bit flips, truncation, insertion of random bytes, and header fields set to
extremes (format-aware: EDF/BDF header fields, the NPY header's shape and dtype, zip
directory sizes, the Parquet footer length, WFDB header tokens, CSV numbers).

Two layers: the reader (:func:`fileformats.read_trace`, where anything but a trace or an
``UnreadableFileError`` is a crash, and any warning is counted) and the API
(``POST /v1/analyses`` through the Flask test client, where a 5xx is a failure).

The full run (the figures in the README's reliability table)::

    PYTHONPATH=$PWD python tests/fileformats/fuzz.py --count 500 --layer api

prints the counts by outcome per format as JSON and exits 1 on any crash or 5xx.
"""

from __future__ import annotations

import argparse
import io
import json
import re
import sys
import tempfile
import warnings
from collections import Counter
from collections.abc import Callable
from pathlib import Path

import numpy as np
from trace_files import LABEL, digital_trace, physical, write_csv, write_edf, write_wfdb

FS_HZ = 100.0
#: A little above the engine's shortest recording (features.conditioning.MIN_DURATION_S), s.
DURATION_S = 24.0
FORMATS = ("csv", "npy", "npz", "edf", "bdf", "wfdb", "parquet")
#: Form fields per format: the rate only where the format does not carry it.
FORMS = {"csv": {"sampling_rate_hz": str(FS_HZ)}, "npy": {"sampling_rate_hz": str(FS_HZ)}}

Files = dict[str, bytes]


# -- valid files -------------------------------------------------------------------------

def valid_files(seed: int = 5) -> dict[str, Files]:
    """One valid recording per format, as file name -> bytes (WFDB: header and signal)."""
    digital = digital_trace(seed=seed, duration_s=DURATION_S, fs_hz=FS_HZ)
    values = physical(digital)
    out: dict[str, Files] = {}
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        out["csv"] = {"trace.csv": write_csv(root / "t.csv", values, [LABEL]).read_bytes()}
        out["edf"] = {"trace.edf": write_edf(root / "t.edf", digital, FS_HZ).read_bytes()}
        header = write_wfdb(root, "trace", digital, FS_HZ)
        out["wfdb"] = {"trace.hea": header.read_bytes(),
                       "trace.dat": header.with_suffix(".dat").read_bytes()}
        out["bdf"] = {"trace.bdf": _write_bdf(root / "t.bdf", values)}
    npy = io.BytesIO()
    np.save(npy, values)
    out["npy"] = {"trace.npy": npy.getvalue()}
    npz = io.BytesIO()
    np.savez_compressed(npz, **{LABEL: values, "sampling_rate_hz": np.float64(FS_HZ)})
    out["npz"] = {"trace.npz": npz.getvalue()}
    out["parquet"] = {"trace.parquet": _parquet(values)}
    return out


def _write_bdf(path: Path, values: np.ndarray) -> bytes:
    import edfio

    signal = edfio.BdfSignal(values, FS_HZ, label=LABEL, physical_dimension="N",
                             physical_range=(float(values.min()) - 1, float(values.max()) + 1))
    edfio.Bdf([signal]).write(path)
    return path.read_bytes()


def _parquet(values: np.ndarray) -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    field = pa.field(LABEL, pa.float64(), metadata={"unit": "N"})
    table = pa.table({LABEL: values}, schema=pa.schema(
        [field], metadata={"sampling_rate_hz": str(FS_HZ)}))
    buffer = io.BytesIO()
    pq.write_table(table, buffer, compression="zstd")
    return buffer.getvalue()


# -- mutations ---------------------------------------------------------------------------

_EXTREME_INTS = (0, 1, 0x7F, 0xFF, 0x7FFF, 0xFFFF, 0x7FFFFFFF, 0xFFFFFFFF, 2**63 - 1, 2**64 - 1)
_EXTREME_TEXT = ("0", "-1", "1", "99999999", "-9999999", "1e308", "nan", "inf", "", "x")


def _flip(data: bytes, rng: np.random.Generator) -> bytes:
    out = bytearray(data)
    for _ in range(int(rng.integers(1, 9))):
        k = int(rng.integers(len(out)))
        out[k] ^= 1 << int(rng.integers(8))
    return bytes(out)


def _truncate(data: bytes, rng: np.random.Generator) -> bytes:
    return data[:int(rng.integers(len(data)))]


def _insert(data: bytes, rng: np.random.Generator) -> bytes:
    k = int(rng.integers(len(data) + 1))
    junk = rng.integers(0, 256, int(rng.integers(1, 65)), dtype=np.uint8).tobytes()
    return data[:k] + junk + data[k:]


def _binary_field(data: bytes, rng: np.random.Generator) -> bytes:
    """A 1-, 2-, 4- or 8-byte little-endian integer somewhere, set to an extreme."""
    width = int(rng.choice([1, 2, 4, 8]))
    if len(data) < width:
        return data
    k = int(rng.integers(len(data) - width + 1))
    value = int(rng.choice(_EXTREME_INTS)) % (1 << (8 * width))
    return data[:k] + value.to_bytes(width, "little") + data[k + width:]


def _ascii_field(data: bytes, start: int, width: int, rng: np.random.Generator) -> bytes:
    text = str(rng.choice(_EXTREME_TEXT)).ljust(width)[:width].encode("ascii")
    return data[:start] + text + data[start + width:]


#: EDF/BDF header fields (offset, width): bytes in header, data records, record duration,
#: number of signals (EDF specification, Kemp et al. 1992); and for the one signal: physical
#: min/max, digital min/max, samples per data record.
_EDF_FIELDS = ((184, 8), (236, 8), (244, 8), (252, 4), (360, 8), (368, 8), (376, 8),
               (384, 8), (472, 8))


def _edf_field(data: bytes, rng: np.random.Generator) -> bytes:
    start, width = _EDF_FIELDS[int(rng.integers(len(_EDF_FIELDS)))]
    return _ascii_field(data, start, width, rng)


def _npy_field(data: bytes, rng: np.random.Generator) -> bytes:
    """The NPY header's shape or dtype set to an extreme (the header keeps its length)."""
    end = data.index(b"\n") + 1 if b"\n" in data[:4096] else min(len(data), 128)
    header = data[:end].decode("latin-1")
    choice = int(rng.integers(3))
    if choice == 0:
        size = str(rng.choice(["0", "-1", str(2**62), str(2**64), "99999999999", "3, 2**40"]))
        header = re.sub(r"'shape': \([^)]*\)", f"'shape': ({size},)", header)
    elif choice == 1:
        dtype = str(rng.choice(["|O", "<f16", "<c16", ">f8", "<f2", "|V8", "<U4", "<M8[s]"]))
        header = re.sub(r"'descr': '[^']*'", f"'descr': '{dtype}'", header)
    else:
        header = header.replace("False", "True")
    return header.encode("latin-1") + data[end:]


#: Zip fields (offset, width) after each record's signature (PKWARE APPNOTE.TXT 4.3.7,
#: 4.3.12, 4.3.16): local header sizes and name length; central directory sizes, name
#: length and local header offset; end record's directory size and offset.
_ZIP_FIELDS = {
    b"PK\x03\x04": ((18, 4), (22, 4), (26, 2)),
    b"PK\x01\x02": ((20, 4), (24, 4), (28, 2), (42, 4)),
    b"PK\x05\x06": ((10, 2), (12, 4), (16, 4)),
}


def _zip_field(data: bytes, rng: np.random.Generator) -> bytes:
    """A size or offset of a zip local header or central directory entry set to an extreme."""
    spots = [(m.start() + off, width) for signature, fields in _ZIP_FIELDS.items()
             for m in re.finditer(re.escape(signature), data) for off, width in fields]
    if not spots:
        return _binary_field(data, rng)
    k, width = spots[int(rng.integers(len(spots)))]
    value = int(rng.choice(_EXTREME_INTS)) % (1 << (8 * width))
    return data[:k] + value.to_bytes(width, "little") + data[k + width:]


def _parquet_field(data: bytes, rng: np.random.Generator) -> bytes:
    """The footer length (the 4 bytes before the closing ``PAR1``) set to an extreme."""
    if len(data) < 8:
        return data
    value = int(rng.choice(_EXTREME_INTS)) % (1 << 32)
    return data[:-8] + value.to_bytes(4, "little") + data[-4:]


def _wfdb_field(data: bytes, rng: np.random.Generator) -> bytes:
    """One token of the header's record or signal line set to an extreme."""
    lines = data.decode("latin-1").split("\n")
    k = int(rng.integers(min(2, len(lines))))
    tokens = lines[k].split(" ")
    j = int(rng.integers(len(tokens)))
    tokens[j] = str(rng.choice(_EXTREME_TEXT + ("16x99999", "508", "0", "212", "24")))
    lines[k] = " ".join(tokens)
    return "\n".join(lines).encode("latin-1")


def _csv_field(data: bytes, rng: np.random.Generator) -> bytes:
    """One number of the CSV set to an extreme."""
    numbers = list(re.finditer(rb"[-0-9.e]+", data))
    if not numbers:
        return data
    m = numbers[int(rng.integers(len(numbers)))]
    text = str(rng.choice(_EXTREME_TEXT + ("1e999", "-1e999", "9" * 400))).encode()
    return data[:m.start()] + text + data[m.end():]


_FIELD_MUTATORS: dict[str, Callable[[bytes, np.random.Generator], bytes]] = {
    "csv": _csv_field, "npy": _npy_field, "npz": _zip_field, "edf": _edf_field,
    "bdf": _edf_field, "wfdb": _wfdb_field, "parquet": _parquet_field,
}


def mutate(fmt: str, files: Files, rng: np.random.Generator) -> Files:
    """One mutant of ``files``: one to three mutations of one file (WFDB: header or signal)."""
    out = dict(files)
    name = sorted(out)[int(rng.integers(len(out)))]
    data = out[name]
    field = _FIELD_MUTATORS["wfdb" if name.endswith(".hea") else fmt]
    if fmt == "wfdb" and name.endswith(".dat"):
        field = _binary_field
    mutators = (_flip, _truncate, _insert, field, field, _binary_field)
    for _ in range(int(rng.integers(1, 4))):
        if not data:
            break
        data = mutators[int(rng.integers(len(mutators)))](data, rng)
    out[name] = data
    return out


def mutants(fmt: str, files: Files, count: int, seed: int) -> list[Files]:
    """``count`` mutants of one format's valid files, reproducible from ``seed``."""
    rng = np.random.default_rng([seed, FORMATS.index(fmt)])
    return [mutate(fmt, files, rng) for _ in range(count)]


# -- the two layers ----------------------------------------------------------------------

def reader_outcome(fmt: str, files: Files, fs_hz: float | None = None) -> str:
    """``"read"``, ``"refused"``, ``"crash:<type>"`` or ``"warning:<category>"``.

    ``fs_hz`` is given to the reader; by default only for the formats without a rate.
    """
    from fileformats import UnreadableFileError, read_trace

    if fs_hz is None and fmt in FORMS:
        fs_hz = FS_HZ
    source: bytes | Files = files if fmt == "wfdb" else next(iter(files.values()))
    name = next(iter(files))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            read_trace(source, name=name, fs_hz=fs_hz)
            outcome = "read"
        except UnreadableFileError:
            outcome = "refused"
        except Exception as error:  # noqa: BLE001 - the fuzzer counts whatever escapes
            outcome = f"crash:{type(error).__name__}"
    if caught and not outcome.startswith("crash"):
        outcome = f"warning:{caught[0].category.__name__}"
    return outcome


def api_post(client: object, files: Files, *, fmt: str | None = None,
             form: dict[str, str] | None = None) -> object:
    """POST the files as multipart ``file`` parts to ``/v1/analyses``, with ``form`` (by
    default the rate for the formats without one)."""
    from werkzeug.datastructures import FileStorage, MultiDict
    from werkzeug.test import encode_multipart

    values = MultiDict(list((FORMS.get(fmt or "", {}) if form is None else form).items()))
    for name, content in files.items():
        values.add("file", FileStorage(stream=io.BytesIO(content), filename=name,
                                       content_type="application/octet-stream"))
    boundary, body = encode_multipart(values)
    return client.post("/v1/analyses", data=body,  # type: ignore[attr-defined]
                       content_type=f"multipart/form-data; boundary={boundary}")


def api_outcome(client: object, fmt: str, files: Files) -> str:
    """The response's status code as text, ``"warning:<category>"`` if a warning escaped."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        status = str(api_post(client, files, fmt=fmt).status_code)  # type: ignore[attr-defined]
    return f"warning:{caught[0].category.__name__}" if caught else status


def run(formats: tuple[str, ...], count: int, seed: int, layer: str) -> dict[str, Counter]:
    """Counts of outcomes per format over ``count`` mutants each."""
    base = valid_files()
    counts: dict[str, Counter] = {}
    client = None
    if layer == "api":
        from service import create_app

        client = create_app({"TESTING": True}).test_client()
    for fmt in formats:
        tally: Counter = Counter()
        for files in mutants(fmt, base[fmt], count, seed):
            if client is None:
                tally[reader_outcome(fmt, files)] += 1
            else:
                tally[api_outcome(client, fmt, files)] += 1
        counts[fmt] = tally
    return counts


def failed(outcome: str) -> bool:
    """A crash, an escaped warning or a 5xx."""
    return outcome.startswith(("crash", "warning", "5"))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=500, help="mutants per format")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--layer", choices=("reader", "api"), default="api")
    parser.add_argument("--formats", default=",".join(FORMATS))
    args = parser.parse_args(argv)
    formats = tuple(f for f in args.formats.split(",") if f)
    counts = run(formats, args.count, args.seed, args.layer)
    report = {fmt: dict(sorted(c.items())) for fmt, c in counts.items()}
    json.dump({"layer": args.layer, "count": args.count, "seed": args.seed,
               "outcomes": report}, sys.stdout, indent=1)
    sys.stdout.write("\n")
    return 1 if any(failed(o) for c in counts.values() for o in c) else 0


if __name__ == "__main__":
    raise SystemExit(main())
