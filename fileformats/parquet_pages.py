"""Parquet footers and page headers, read without pyarrow: what each page will inflate to.

A Parquet file's footer declares each column chunk's sizes, but the reader allocates what
each *page header* declares (``uncompressed_page_size``) and decompresses into it. A
footer can understate what its pages hold; walking the page headers of the chunks to be
read and adding up their declared sizes bounds the decompression by what the pages
themselves say, before any page is inflated.

Page headers are Thrift structs in the compact protocol (Apache Thrift, "Thrift Compact
protocol encoding", doc/specs/thrift-compact-protocol.md; Apache Parquet format,
parquet.thrift ``struct PageHeader``: 1 type, 2 uncompressed_page_size,
3 compressed_page_size, 4 crc, 5-8 the kind's own header).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from fileformats.errors import UnreadableFileError

#: Deepest nesting of structs and lists read (a PageHeader nests three deep: statistics).
_MAX_DEPTH = 16
#: Longest page header read, bytes (statistics of a numeric column are a few dozen).
MAX_PAGE_HEADER_BYTES = 1 << 20


class _Broken(ValueError):
    """A page header that is not one."""


class _Reader:
    def __init__(self, data: bytes, pos: int, end: int) -> None:
        self.data, self.pos, self.end = data, pos, end

    def byte(self) -> int:
        if self.pos >= self.end:
            raise _Broken("page header runs past its bounds")
        value = self.data[self.pos]
        self.pos += 1
        return value

    def varint(self) -> int:
        shift = value = 0
        while True:
            b = self.byte()
            value |= (b & 0x7F) << shift
            if not b & 0x80:
                return value
            shift += 7
            if shift > 63:
                raise _Broken("varint longer than 64 bits")

    def zigzag(self) -> int:
        n = self.varint()
        return (n >> 1) ^ -(n & 1)

    def skip(self, count: int) -> None:
        if count < 0 or self.pos + count > self.end:
            raise _Broken("field runs past the page header's bounds")
        self.pos += count

    def value(self, kind: int, depth: int) -> object:
        """Read one value of compact type ``kind``: ints, bytes, lists and structs (dicts)."""
        if depth > _MAX_DEPTH:
            raise _Broken("nested too deeply")
        if kind in (1, 2):  # boolean (in a field header, the value is the type)
            return kind == 1
        if kind == 3:
            return self.byte()
        if kind in (4, 5, 6):
            return self.zigzag()
        if kind == 7:
            self.skip(8)
            return None
        if kind == 8:
            size = self.varint()
            start = self.pos
            self.skip(size)
            return self.data[start:self.pos]
        if kind in (9, 10):
            head = self.byte()
            size = head >> 4 if head >> 4 != 15 else self.varint()
            if size > self.end - self.pos:  # every element takes at least one byte
                raise _Broken("list longer than its bytes")
            element = head & 0x0F
            if element in (1, 2):  # booleans in a list take one byte each
                return [self.byte() == 1 for _ in range(size)]
            return [self.value(element, depth + 1) for _ in range(size)]
        if kind == 11:
            size = self.varint()
            if size > self.end - self.pos:
                raise _Broken("map longer than its bytes")
            if size:
                types = self.byte()
                for _ in range(size):
                    self.value(types >> 4, depth + 1)
                    self.value(types & 0x0F, depth + 1)
            return None
        if kind == 12:
            return self.struct(depth + 1)
        raise _Broken(f"unknown compact type {kind}")

    def struct(self, depth: int) -> dict[int, object]:
        """Read a struct: its fields by id."""
        fields: dict[int, object] = {}
        field_id = 0
        while True:
            head = self.byte()
            kind = head & 0x0F
            if kind == 0:
                return fields
            delta = head >> 4
            field_id = field_id + delta if delta else self.zigzag()
            fields[field_id] = self.value(kind, depth)


@dataclass(frozen=True)
class Chunk:
    """One column chunk as the footer declares it (parquet.thrift ColumnMetaData)."""

    name: str
    first_page: int
    compressed_bytes: int
    uncompressed_bytes: int


def _int(value: object) -> int:
    if not isinstance(value, int) or isinstance(value, bool):
        raise _Broken("a size is missing or not an integer")
    return value


def column_chunks(data: bytes) -> list[Chunk]:
    """Every column chunk of a Parquet file, from its footer, decoded here (not by pyarrow).

    pyarrow 26 aborts the process (``std::terminate``) when Python asks for the
    metadata of a column chunk whose size statistics disagree with the schema, so the
    readers never ask it: the offsets and sizes come from this decoding instead.

    Raises
    ------
    UnreadableFileError
        When the footer is missing, encrypted or malformed.
    """
    try:
        if len(data) < 12 or data[:4] != b"PAR1" or data[-4:] != b"PAR1":
            raise _Broken("the file does not start and end with PAR1 (or is encrypted)")
        length = int.from_bytes(data[-8:-4], "little")
        start = len(data) - 8 - length
        if start < 4:
            raise _Broken("the footer length runs past the file")
        meta = _Reader(data, start, len(data) - 8).struct(0)
        chunks = []
        # The footer is untrusted: a field of the wrong type raises TypeError or
        # AttributeError, answered below, so the fields are left untyped (Any) here.
        groups: Any = meta.get(4) or []
        for group in groups:
            for chunk in (group or {}).get(1) or []:
                column = chunk.get(3) if isinstance(chunk, dict) else None
                if not isinstance(column, dict):
                    raise _Broken("a column chunk without its metadata")
                path: Any = column.get(3) or []
                dictionary = column.get(11)
                data_page = _int(column.get(9))
                first = _int(dictionary) if isinstance(dictionary, int) and dictionary > 0 \
                    else data_page
                chunks.append(Chunk(
                    name=".".join(bytes(p).decode("utf-8", "replace") for p in path),
                    first_page=first, compressed_bytes=_int(column.get(7)),
                    uncompressed_bytes=_int(column.get(6))))
    except (_Broken, TypeError, AttributeError) as error:
        raise UnreadableFileError(
            "file", f"`file` must have a well-formed Parquet footer; got one that is not "
            f"({error})."
        ) from None
    return chunks


def page_sizes(data: bytes, start: int, length: int) -> tuple[int, int]:
    """Declared uncompressed and compressed bytes of the pages of one column chunk.

    Parameters
    ----------
    data
        The whole file.
    start
        Offset of the chunk's first page (its dictionary page if any).
    length
        The chunk's ``total_compressed_size`` from the footer.

    Returns
    -------
    uncompressed, compressed
        Sums over the pages of ``uncompressed_page_size`` and of the bytes the chunk
        spans (headers and compressed pages).

    Raises
    ------
    UnreadableFileError
        When a page header is malformed, declares a negative size, or a page runs
        past the chunk or the file.
    """
    end = start + length
    if start < 0 or length < 0 or end > len(data):
        raise UnreadableFileError(
            "file", f"`file` must hold its column chunks within the file; one spans bytes "
            f"{start}-{end} of {len(data)}."
        )
    pos = start
    uncompressed = 0
    try:
        while pos < end:
            reader = _Reader(data, pos, min(end, pos + MAX_PAGE_HEADER_BYTES))
            header = reader.struct(0)
            inflated, stored = _int(header.get(2)), _int(header.get(3))
            if inflated < 0 or stored < 0:
                raise _Broken("page sizes missing or negative")
            uncompressed += inflated
            pos = reader.pos + stored
        if pos != end:
            raise _Broken("the last page runs past its column chunk")
    except _Broken as error:
        raise UnreadableFileError(
            "file", f"`file` must have well-formed Parquet page headers; got one that is not "
            f"({error})."
        ) from None
    return uncompressed, length
