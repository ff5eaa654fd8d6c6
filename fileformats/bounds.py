"""Sizes before bytes: the limits every reader checks before it decompresses or allocates.

A reader first reads what the file declares (an NPY header's shape and dtype, a zip
directory, Parquet metadata, an EDF or WFDB header), refuses a declared size past the
sample limit, and only then reads data, through a stream whose output is capped as it
goes (an absolute cap and a ratio to the compressed input), so that a file that lies in
its directory is cut off too.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import IO

from features.limits import DEFAULT_MAX_SAMPLES
from fileformats.errors import UnreadableFileError
from fileformats.raw import MAX_ITEMSIZE

#: Room for what is not samples (NPY headers of at most a few dozen members, Parquet page
#: headers), bytes.
OVERHEAD_BYTES = 64 << 10
#: Largest expansion of compressed data accepted once the output passes RATIO_FLOOR_BYTES.
#: Deflate of sampled sensor data stays under 20:1 even for 16-bit values stored as float64;
#: a constant channel reaches deflate's ceiling (about 1032:1) and carries no signal either.
MAX_RATIO = 200
#: Output below this size is never refused for its ratio (short files of zeros are legal).
RATIO_FLOOR_BYTES = 8 << 20
#: Chunk of a streamed read, bytes.
CHUNK_BYTES = 1 << 20


def resolve_limit(max_samples: int | None) -> int:
    """``max_samples``, or the default when None; a positive int either way."""
    limit = DEFAULT_MAX_SAMPLES if max_samples is None else int(max_samples)
    if limit < 1:
        raise ValueError(f"`max_samples` must be a positive integer; got {limit}.")
    return limit


def check_samples(declared: int, max_samples: int, where: str) -> None:
    """Refuse a file whose declared sample count passes the limit.

    Parameters
    ----------
    declared
        Samples over all channels, as the file declares them (any size: Python int).
    max_samples
        The limit.
    where
        What declares it (``"its header"``, ``"its zip directory"`` ...).

    Raises
    ------
    UnreadableFileError
        Naming the limit and the declared count.
    """
    if declared > max_samples:
        raise UnreadableFileError(
            "file", f"`file` must hold at most {max_samples} samples over all channels (the "
            f"sample limit, HEARTSWAY_MAX_SAMPLES); got {declared} declared in {where}."
        )


def byte_cap(max_samples: int) -> int:
    """Most bytes of samples (and headers) a file within the limit can expand to."""
    return max_samples * MAX_ITEMSIZE + OVERHEAD_BYTES


def refuse_bytes(produced: int, max_samples: int, where: str) -> UnreadableFileError:
    """The error for decompressed output past :func:`byte_cap` of ``max_samples``."""
    return UnreadableFileError(
        "file", f"`file` must expand to at most {byte_cap(max_samples)} bytes ({max_samples} "
        f"samples, the sample limit HEARTSWAY_MAX_SAMPLES, at {MAX_ITEMSIZE} bytes each, and "
        f"{OVERHEAD_BYTES} bytes of headers); got {produced} bytes in {where}."
    )


def check_ratio(produced: int, compressed: int, where: str) -> None:
    """Refuse output more than :data:`MAX_RATIO` times its compressed size (past the floor)."""
    if produced > RATIO_FLOOR_BYTES and produced > MAX_RATIO * max(compressed, 1):
        raise UnreadableFileError(
            "file", f"`file` must not expand more than {MAX_RATIO}-fold when decompressed; "
            f"{where} expands {produced} bytes from {compressed} (a decompression bomb?)."
        )


def read_capped(stream: IO[bytes], size: int, *, compressed: int, where: str,
                produced_before: int = 0, max_samples: int | None = None) -> bytes:
    """Read exactly ``size`` bytes from a decompressing stream, in chunks, within the caps.

    Parameters
    ----------
    stream
        A file-like object (``zipfile.ZipExtFile``).
    size
        Bytes wanted (already checked against the declared limit).
    compressed
        Compressed bytes behind the whole stream (the ratio's denominator).
    where
        Names the stream in messages.
    produced_before
        Bytes this stream gave before this call (a header).
    max_samples
        The sample limit, whose :func:`byte_cap` bounds ``produced_before + size``;
        None for no bound but ``size``.

    Raises
    ------
    UnreadableFileError
        When the stream ends early, or passes a cap.
    """
    if max_samples is not None and produced_before + size > byte_cap(max_samples):
        raise refuse_bytes(produced_before + size, max_samples, where)
    parts, got = [], 0
    while got < size:
        chunk = stream.read(min(CHUNK_BYTES, size - got))
        if not chunk:
            raise UnreadableFileError(
                "file", f"`file` must hold the data its header declares; {where} ends after "
                f"{got} of {size} bytes."
            )
        parts.append(chunk)
        got += len(chunk)
        check_ratio(produced_before + got, compressed, where)
    return b"".join(parts)


def product(values: Iterable[int]) -> int:
    """Exact product of declared sizes (Python ints: no overflow)."""
    return math.prod(int(v) for v in values)
