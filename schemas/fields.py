"""Custom marshmallow fields for numeric traces and strict numbers.

A trace of 75,000 samples must not go through 75,000 marshmallow ``Float``
fields: :class:`SamplesField` packs the list into float64 in one C pass and checks
the result with numpy, falling back to a per-element type check only when the fast
pass cannot decide.
"""

from __future__ import annotations

import base64
import binascii
import math
from array import array as packed_array
from typing import Any

import numpy as np
from marshmallow import ValidationError, fields

from features.limits import MAX_SAMPLE_MAGNITUDE as LIMIT_SAMPLE_MAGNITUDE

#: Little-endian encodings accepted for ``samples_base64``, by ``dtype`` name.
BASE64_DTYPES: dict[str, np.dtype[Any]] = {
    "float32": np.dtype("<f4"),
    "float64": np.dtype("<f8"),
    "int16": np.dtype("<i2"),
    "int32": np.dtype("<i4"),
}

#: Standard base64 with padding (RFC 4648 section 4), as a JSON Schema pattern.
BASE64_PATTERN = r"^(?:[A-Za-z0-9+/]{4})*(?:[A-Za-z0-9+/]{2}==|[A-Za-z0-9+/]{3}=)?$"

_NUMBER_TYPES = frozenset({int, float})
#: JSON ``null`` in a trace: a sample the device lost (a dropout), loaded as NaN.
_SAMPLE_TYPES = _NUMBER_TYPES | {type(None)}


#: Largest sample magnitude accepted, in the channel's own unit (the engine's limit).
MAX_SAMPLE_MAGNITUDE = LIMIT_SAMPLE_MAGNITUDE


def _first_too_large(values: np.ndarray) -> int | None:
    """Index of the first element with magnitude above MAX_SAMPLE_MAGNITUDE, or None."""
    big = np.abs(values) > MAX_SAMPLE_MAGNITUDE
    if not big.any():
        return None
    return int(np.flatnonzero(big)[0])


def _packed_samples(value: list[Any]) -> np.ndarray | None:
    """``value`` as float64 in one pass, or None when the element types must be checked.

    ``array.array("d", ...)`` converts the list in C and refuses strings, ``null``,
    nested lists and integers past float64 (then None: the exact check gives the
    message, or turns ``null`` into NaN). It accepts booleans, which the contract
    refuses; a boolean converts to exactly 0.0 or 1.0, so only the elements that came
    out as one of those have their type looked at.
    """
    if not value:
        return None
    try:
        packed = packed_array("d", value)
    except (TypeError, OverflowError):
        return None
    values = np.frombuffer(packed, dtype=np.float64)
    suspects = np.flatnonzero((values == 0.0) | (values == 1.0)).tolist()
    if suspects and bool in map(type, map(value.__getitem__, suspects)):
        return None
    return values


def _first_infinite(values: np.ndarray) -> int | None:
    """Index of the first infinite element, or None. NaN is a missing sample, not refused."""
    bad = np.isinf(values)
    if not bad.any():
        return None
    return int(np.flatnonzero(bad)[0])


class SamplesField(fields.Field[Any]):
    """A JSON array of numbers, loaded as a 1-D float64 numpy array.

    Loading rejects anything but a flat list of JSON numbers and ``null``: strings
    that look like numbers, booleans and nested lists are errors, as are values that
    overflow float64. ``null`` is a sample the device lost (a dropout): it is loaded as
    NaN, which the engine masks as a gap. An already-decoded 1-D numeric numpy array
    (from the CSV reader, NaN for an empty cell) is accepted as is; infinity is refused.
    """

    default_error_messages = {
        "type": "`{field}` must be a list of numbers; got {got}.",
        "element": (
            "`{field}` must hold only numbers, or null for a lost sample; got {got} (JSON "
            "numbers are written without quotes)."
        ),
        "empty": "`{field}` must hold at least one sample; got an empty list.",
        "finite": "`{field}` must not hold infinity (a lost sample is null); got an infinite "
                  "value at index {index}.",
    }

    def __init__(self, **kwargs: Any) -> None:
        metadata = {
            "type": "array",
            "items": {
                "type": ["number", "null"],
                "minimum": -MAX_SAMPLE_MAGNITUDE,
                "maximum": MAX_SAMPLE_MAGNITUDE,
            },
        }
        metadata.update(kwargs.pop("metadata", {}))
        super().__init__(metadata=metadata, **kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> np.ndarray:
        name = attr or "samples"
        if isinstance(value, np.ndarray):
            if value.ndim != 1 or value.dtype.kind not in "iuf":
                raise self.make_error("type", field=name, got=f"an array of shape {value.shape}")
            array = value.astype(np.float64, copy=False)
        else:
            if not isinstance(value, list):
                raise self.make_error("type", field=name, got=type(value).__name__)
            packed = _packed_samples(value)
            array = self._checked(value, name) if packed is None else packed
        if array.size == 0:
            raise self.make_error("empty", field=name)
        index = _first_infinite(array)
        if index is not None:
            raise self.make_error("finite", field=name, index=index)
        return array

    def _checked(self, value: list[Any], name: str) -> np.ndarray:
        """``value`` as float64 after checking each element's type (JSON numbers, null)."""
        kinds = set(map(type, value))
        if not kinds <= _SAMPLE_TYPES:
            odd = sorted(k.__name__ for k in kinds - _SAMPLE_TYPES)
            raise self.make_error("element", field=name, got=", ".join(odd))
        try:
            return np.asarray(value, dtype=np.float64)
        except OverflowError:
            raise self.make_error(
                "element", field=name, got="an integer too large for float64"
            ) from None

    def _serialize(self, value: Any, attr: str | None, obj: Any, **kwargs: Any) -> Any:
        if value is None:
            return None
        return [float(v) if math.isfinite(v) else None for v in np.asarray(value, float).tolist()]


def decode_base64_samples(text: str, dtype_name: str, *, field: str) -> np.ndarray:
    """Decode little-endian binary samples from base64 into a float64 array.

    Parameters
    ----------
    text
        Standard base64 (RFC 4648 section 4), padding included.
    dtype_name
        One of the keys of :data:`BASE64_DTYPES`.
    field
        Name used in error messages.

    Returns
    -------
    numpy.ndarray
        1-D float64 array with one element per encoded value.

    Raises
    ------
    marshmallow.ValidationError
        When the text is not base64, its length is not a multiple of the item
        size, it decodes to nothing, or a float value is infinite (NaN is a lost
        sample, a gap, and is kept).
    """
    dtype = BASE64_DTYPES[dtype_name]
    try:
        raw = base64.b64decode(text, validate=True)
    except (binascii.Error, ValueError):
        raise ValidationError(
            f"`{field}` must be standard base64 (RFC 4648, with padding); got text that "
            "does not decode."
        ) from None
    if len(raw) == 0:
        raise ValidationError(f"`{field}` must hold at least one sample; got 0 bytes.")
    if len(raw) % dtype.itemsize:
        raise ValidationError(
            f"`{field}` must decode to a multiple of {dtype.itemsize} bytes for dtype "
            f"{dtype_name}; got {len(raw)} bytes."
        )
    # A signalling NaN raises numpy's "invalid value in cast" warning when widened; it
    # becomes a quiet NaN, a lost sample like any other, so the warning is not needed.
    with np.errstate(invalid="ignore", over="ignore"):
        array = np.frombuffer(raw, dtype=dtype).astype(np.float64)
    index = _first_infinite(array)
    if index is not None:
        raise ValidationError(
            f"`{field}` must not hold infinity (a lost sample is NaN); got an infinite value "
            f"at index {index}."
        )
    return array


def check_magnitude(values: np.ndarray, *, field: str) -> None:
    """Refuse a trace holding a value of magnitude above :data:`MAX_SAMPLE_MAGNITUDE`.

    Raises
    ------
    marshmallow.ValidationError
        Naming ``field`` and the index of the first such value.
    """
    index = _first_too_large(values)
    if index is not None:
        raise ValidationError(
            f"`{field}` must hold numbers of magnitude at most {MAX_SAMPLE_MAGNITUDE:g}; got "
            f"one larger at index {index}."
        )


class StrictFloat(fields.Float):
    """A float that accepts only JSON numbers, never numeric strings or booleans.

    marshmallow's ``Float`` turns ``"250"`` into 250.0; a contract that says
    *number* should not, so that a client sending strings learns it at once.
    Non-finite values are refused (``allow_nan`` is off).
    """

    default_error_messages = {"strict": "Not a number: JSON numbers are written without quotes."}

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.make_error("strict")
        return super()._deserialize(value, attr, data, **kwargs)
