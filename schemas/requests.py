"""Request schemas: JSON (or a parsed CSV upload) into typed analysis requests.

``AnalysisRequestSchema().load(body)`` returns an :class:`AnalysisRequest`,
frozen and fully typed, with every trace already a float64 numpy array. The
schemas are strict: unknown members, numbers sent as strings, infinite
samples and channels of unequal length are all refused, and every offending
field is reported at once. A ``null`` sample (NaN in ``samples_base64``) is a sample
the device lost: it loads as NaN and the engine masks it as a gap.

marshmallow 4 notes: hooks receive keyword arguments (``partial``, ``many``,
``unknown``, ``data_key``), which every hook here accepts as ``**kwargs``;
``Schema.context`` is gone, so limits are passed to the constructor.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError, fields, post_load, validates_schema
from marshmallow.validate import Length, OneOf, Range

from features.limits import (
    COUNTS_UNIT,
    COUPLINGS,
    DEFAULT_MAX_SAMPLES,
    MAINS_AUTO,
    MAINS_HZ,
    MAX_BODY_MASS_KG,
    MAX_CHANNELS,
    MAX_FS_HZ,
    MAX_RATE_BPM,
    MAX_WINDOW_S,
    MIN_BODY_MASS_KG,
    MIN_FS_HZ,
    MIN_RATE_BPM,
    MIN_WINDOW_S,
    PLACEMENTS,
    QUANTITIES,
    mains_choices,
    resolve_coupling,
    units_text,
)
from features.limits import units_of as valid_units
from schemas.fields import (
    BASE64_DTYPES,
    BASE64_PATTERN,
    MAX_SAMPLE_MAGNITUDE,
    SamplesField,
    StrictFloat,
    check_magnitude,
    decode_base64_samples,
)

POSTURES = ("lying", "reclining", "seated", "standing", "unknown")
SEXES = ("female", "male", "other", "unknown")
INCLUDE_PARTS = ("beats", "signals", "template", "windows")
MAINS_CHOICES = ("auto", *MAINS_HZ)
#: Longest ``samples_base64`` worth sending: the default sample cap at the widest
#: dtype (float64, 8 bytes) in base64 (4 characters per 3 bytes, padded).
BASE64_MAX_LENGTH = 4 * -(-DEFAULT_MAX_SAMPLES * 8 // 3)
#: Largest sensor coordinate accepted, in metres (no support is 20 m across).
MAX_POSITION_M = 10.0


# --------------------------------------------------------------------------
# Typed request objects
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class CountsScaleRequest:
    """Scale from raw sensor counts to a physical unit: ``(counts - offset) * per_count``."""

    unit: str
    per_count: float
    offset_counts: float = 0.0


@dataclass(frozen=True)
class ChannelRequest:
    """One sensor channel, decoded."""

    label: str
    quantity: str
    unit: str
    samples: np.ndarray
    counts_scale: CountsScaleRequest | None = None
    position_m: tuple[float, float] | None = None
    coupling: str | None = None


@dataclass(frozen=True)
class SubjectRequest:
    """Optional facts about the person on the sensor."""

    body_mass_kg: float | None = None
    age_years: float | None = None
    sex: str | None = None


@dataclass(frozen=True)
class RecordingRequest:
    """Optional facts about the recording."""

    placement: str | None = None
    posture: str | None = None
    start_time: dt.datetime | None = None
    device_id: str | None = None


@dataclass(frozen=True)
class OptionsRequest:
    """Analysis options; None means the engine's default."""

    mains_hz: str | int | None = "auto"
    empty_load_kg: float | None = None
    rate_range_bpm: tuple[float, float] | None = None
    include: frozenset[str] = frozenset()
    window_s: float | None = None
    window_overlap_s: float = 0.0


@dataclass(frozen=True)
class AnalysisRequest:
    """A validated analysis request, ready for the engine."""

    sampling_rate_hz: float
    channels: tuple[ChannelRequest, ...]
    subject: SubjectRequest | None = None
    recording: RecordingRequest | None = None
    options: OptionsRequest = OptionsRequest()


# --------------------------------------------------------------------------
# Schemas
# --------------------------------------------------------------------------


def _sorted_choices(choices: tuple[str, ...]) -> str:
    return ", ".join(sorted(choices))


class CountsScaleSchema(Schema):
    """Raw counts to a physical unit."""

    unit = fields.String(
        required=True,
        validate=Length(min=1, max=16),
        metadata={"description": "Physical unit after scaling, for example `N`."},
    )
    per_count = StrictFloat(
        required=True,
        validate=Range(min=-1e6, max=1e6),
        metadata={
            "description": "Physical units per count (non-zero, magnitude at most 1e6).",
            "not": {"const": 0},
        },
    )
    offset_counts = StrictFloat(
        load_default=0.0,
        validate=Range(min=-MAX_SAMPLE_MAGNITUDE, max=MAX_SAMPLE_MAGNITUDE),
        metadata={"description": "Counts subtracted before scaling."},
    )

    @validates_schema
    def _per_count_non_zero(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        if data.get("per_count") == 0:
            raise ValidationError("`per_count` must be non-zero; got 0.", field_name="per_count")

    @post_load
    def _make(self, data: dict[str, Any], **kwargs: Any) -> CountsScaleRequest:
        return CountsScaleRequest(**data)


class ChannelSchema(Schema):
    """One channel: its trace as numbers or as base64 binary, plus what it measures."""

    label = fields.String(
        required=True,
        validate=Length(min=1, max=64),
        metadata={"description": "Channel name, unique within the request."},
    )
    quantity = fields.String(
        required=True,
        validate=OneOf(QUANTITIES, error=f"Must be one of: {_sorted_choices(QUANTITIES)}."),
        metadata={"description": "Physical quantity the sensor measures."},
    )
    unit = fields.String(
        required=True,
        validate=Length(min=1, max=16),
        metadata={
            "description": (
                f"Unit of the samples: {units_text()}; or `{COUNTS_UNIT}` (with counts_scale "
                "for a calibrated scale; without it only for an `ac` channel)."
            )
        },
    )
    samples = SamplesField(
        metadata={
            "description": (
                "The trace, one number per sample (give this or samples_base64); null for a "
                "sample the device lost (a dropout), masked as a gap; at most "
                f"{DEFAULT_MAX_SAMPLES} samples over all channels (the default cap)."
            ),
            "minItems": 1,
            "maxItems": DEFAULT_MAX_SAMPLES,
        }
    )
    samples_base64 = fields.String(
        metadata={
            "description": (
                "The trace as little-endian binary values in standard base64 "
                "(give this and dtype, or samples); its length is a multiple of 4 and "
                "decodes to a whole number of values of the dtype. A NaN in a float dtype "
                "is a lost sample (a gap); infinity is refused."
            ),
            "minLength": 4,
            "maxLength": BASE64_MAX_LENGTH,
            "pattern": BASE64_PATTERN,
        }
    )
    dtype = fields.String(
        validate=OneOf(
            tuple(BASE64_DTYPES), error=f"Must be one of: {_sorted_choices(tuple(BASE64_DTYPES))}."
        ),
        metadata={"description": "Binary type of samples_base64 (little-endian)."},
    )
    counts_scale = fields.Nested(CountsScaleSchema)
    coupling = fields.String(
        validate=OneOf(COUPLINGS, error=f"Must be one of: {_sorted_choices(COUPLINGS)}."),
        metadata={
            "description": (
                "Whether the channel measures the occupant's static weight. `dc`: a "
                "calibrated load cell that carries the whole weight (or its share with the "
                "other dc cells); its level gives the supported mass and the load evidence of "
                "occupancy. `ac`: anything else (film or piezo, pneumatic or hydraulic pads, "
                "a strain strip under one leg, accelerometers, AC-coupled front ends, counts "
                "of unknown scale); occupancy then comes from the heartbeat. Default: `dc` "
                "for force in N, kN, kgf, lbf or counts with counts_scale; `ac` otherwise."
            )
        },
    )
    position_m = fields.List(
        StrictFloat(validate=Range(min=-MAX_POSITION_M, max=MAX_POSITION_M)),
        validate=Length(equal=2),
        metadata={
            "description": (
                f"Sensor position [x, y] in metres on the plate, each within "
                f"±{MAX_POSITION_M:g} m."
            )
        },
    )

    @validates_schema
    def _one_encoding(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        has_list = "samples" in data
        has_b64 = "samples_base64" in data
        if has_list == has_b64:
            raise ValidationError(
                "Give exactly one of `samples` and `samples_base64`; got "
                + ("both." if has_list else "neither."),
                field_name="samples",
            )
        if has_b64 and "dtype" not in data:
            raise ValidationError(
                "`dtype` must be given with `samples_base64`; choose one of "
                f"{_sorted_choices(tuple(BASE64_DTYPES))}.",
                field_name="dtype",
            )
        if has_list and "dtype" in data:
            raise ValidationError(
                "`dtype` applies only to `samples_base64`; remove it.", field_name="dtype"
            )

    @validates_schema
    def _known_unit(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        quantity, unit, scale = data["quantity"], data["unit"], data.get("counts_scale")
        choices = valid_units(quantity)
        if unit not in choices:
            raise ValidationError(
                f"`unit` must be one of {', '.join(choices)} for quantity {quantity!r}; "
                f"got {unit!r}.",
                field_name="unit",
            )
        coupling = data.get("coupling")
        if coupling == "dc" and quantity != "force":
            raise ValidationError(
                "`coupling` may be 'dc' only for a force channel (a load cell that carries "
                f"the occupant's weight); got quantity {quantity!r}. Use 'ac'.",
                field_name="coupling",
            )
        if unit == COUNTS_UNIT and scale is None and \
                resolve_coupling(quantity, unit, False, coupling) == "dc":
            raise ValidationError(
                f"`counts_scale` must be given when unit is {COUNTS_UNIT!r} and coupling is "
                "'dc'; without a calibrated scale the channel cannot measure weight: give "
                "counts_scale, or set coupling to 'ac'.",
                field_name="counts_scale",
            )
        if unit != COUNTS_UNIT and scale is not None:
            raise ValidationError(
                f"`counts_scale` applies only when unit is {COUNTS_UNIT!r}; got unit {unit!r}.",
                field_name="counts_scale",
            )
        physical = [u for u in choices if u != COUNTS_UNIT]
        if scale is not None and scale.unit not in physical:
            raise ValidationError(
                {"counts_scale": {"unit": [
                    f"`counts_scale.unit` must be one of {', '.join(physical)} for quantity "
                    f"{quantity!r}; got {scale.unit!r}."
                ]}}
            )

    @post_load
    def _make(self, data: dict[str, Any], **kwargs: Any) -> ChannelRequest:
        if "samples_base64" in data:
            try:
                samples = decode_base64_samples(
                    data["samples_base64"], data["dtype"], field="samples_base64"
                )
            except ValidationError as error:
                raise ValidationError(error.messages, field_name="samples_base64") from None
        else:
            samples = data["samples"]
        encoding = "samples_base64" if "samples_base64" in data else "samples"
        try:
            check_magnitude(samples, field=encoding)
        except ValidationError as error:
            raise ValidationError(error.messages, field_name=encoding) from None
        position = data.get("position_m")
        return ChannelRequest(
            label=data["label"],
            quantity=data["quantity"],
            unit=data["unit"],
            samples=samples,
            counts_scale=data.get("counts_scale"),
            position_m=None if position is None else (position[0], position[1]),
            coupling=data.get("coupling"),
        )


class SubjectSchema(Schema):
    """Optional facts about the person; never logged."""

    body_mass_kg = StrictFloat(
        validate=Range(min=MIN_BODY_MASS_KG, max=MAX_BODY_MASS_KG),
        metadata={
            "description": f"Body mass in kg, {MIN_BODY_MASS_KG:g}-{MAX_BODY_MASS_KG:g}."
        },
    )
    age_years = StrictFloat(
        validate=Range(min=0, max=130),
        metadata={"description": "Age in years, in [0, 130]."},
    )
    sex = fields.String(
        validate=OneOf(SEXES, error=f"Must be one of: {_sorted_choices(SEXES)}."),
    )

    @post_load
    def _make(self, data: dict[str, Any], **kwargs: Any) -> SubjectRequest:
        return SubjectRequest(**data)


class RecordingSchema(Schema):
    """Optional facts about the recording; the device id is never logged."""

    placement = fields.String(
        validate=OneOf(PLACEMENTS, error=f"Must be one of: {_sorted_choices(PLACEMENTS)}."),
        metadata={"description": "Where the sensor sits."},
    )
    posture = fields.String(
        validate=OneOf(POSTURES, error=f"Must be one of: {_sorted_choices(POSTURES)}."),
    )
    start_time = fields.AwareDateTime(
        metadata={"description": "Start of the recording, ISO 8601 with a UTC offset."}
    )
    device_id = fields.String(validate=Length(min=1, max=128))

    @post_load
    def _make(self, data: dict[str, Any], **kwargs: Any) -> RecordingRequest:
        return RecordingRequest(**data)


class MainsField(fields.Field[Any]):
    """``MAINS_AUTO`` (``"auto"``), one of ``MAINS_HZ`` or null."""

    def __init__(self, **kwargs: Any) -> None:
        metadata = {
            "description": (
                f"Mains hum to remove: {' or '.join(map(str, MAINS_HZ))} (Hz), "
                f"`{MAINS_AUTO}` to detect it, null for none."
            ),
            "oneOf": [
                {"type": "string", "enum": [MAINS_AUTO]},
                {"type": "integer", "enum": list(MAINS_HZ)},
                {"type": "null"},
            ],
        }
        super().__init__(allow_none=True, load_default=MAINS_AUTO, metadata=metadata, **kwargs)

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> Any:
        if value == MAINS_AUTO or (
            not isinstance(value, bool) and isinstance(value, int | float) and value in MAINS_HZ
        ):
            return value if value == MAINS_AUTO else int(value)
        raise ValidationError(f"`mains_hz` must be one of {mains_choices('null')}; "
                              f"got {value!r}.")


def _unique_items(values: list[Any]) -> None:
    repeated = sorted({v for v in values if values.count(v) > 1})
    if repeated:
        raise ValidationError(
            f"`include` must name each part once; got {', '.join(repeated)} more than once."
        )


class OptionsSchema(Schema):
    """Analysis options."""

    mains_hz = MainsField()
    empty_load_kg = StrictFloat(
        validate=Range(min=0, max=200),
        metadata={"description": "Load of the empty support in kg, in [0, 200]; 0 when tared."},
    )
    rate_range_bpm = fields.List(
        StrictFloat(validate=Range(min=MIN_RATE_BPM, max=MAX_RATE_BPM)),
        validate=Length(equal=2),
        metadata={"description": (
            "Plausible heart-rate range [low, high] in bpm, within "
            f"{MIN_RATE_BPM:g}-{MAX_RATE_BPM:g}."
        )},
    )
    window_s = StrictFloat(
        validate=Range(min=MIN_WINDOW_S, max=MAX_WINDOW_S),
        metadata={"description": (
            f"Length of consecutive analysis windows in s, {MIN_WINDOW_S:g}-{MAX_WINDOW_S:g}; "
            "with `include: [\"windows\"]`"
            " each window gets its own feature vector, confidence and usable fraction."
        )},
    )
    window_overlap_s = StrictFloat(
        validate=Range(min=0, max=MAX_WINDOW_S, max_inclusive=False),
        metadata={
            "description": "Overlap of consecutive windows in s, 0 <= overlap < window_s.",
            "exclusiveMaximum": MAX_WINDOW_S,
        },
    )
    include = fields.List(
        fields.String(
            validate=OneOf(
                INCLUDE_PARTS, error=f"Must be one of: {_sorted_choices(INCLUDE_PARTS)}."
            )
        ),
        validate=_unique_items,
        metadata={
            "description": "Bulky parts to add to the response.",
            "uniqueItems": True,
        },
    )

    @validates_schema
    def _windows_defined(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        window = data.get("window_s")
        overlap = data.get("window_overlap_s")
        if "windows" in data.get("include", ()) and window is None:
            raise ValidationError(
                "`options.window_s` is required when `include` has `windows`; got none. "
                f"Give the window length in seconds ({MIN_WINDOW_S:g}-{MAX_WINDOW_S:g}).",
                field_name="window_s",
            )
        if overlap is not None and (window is None or not overlap < window):
            raise ValidationError(
                f"`options.window_overlap_s` must be below `options.window_s`; got {overlap} "
                f"with window_s {window}.",
                field_name="window_overlap_s",
            )

    @validates_schema
    def _range_ordered(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        low_high = data.get("rate_range_bpm")
        if low_high is not None and not low_high[0] < low_high[1]:
            raise ValidationError(
                f"`rate_range_bpm` must be [low, high] with low < high; got {low_high}.",
                field_name="rate_range_bpm",
            )

    @post_load
    def _make(self, data: dict[str, Any], **kwargs: Any) -> OptionsRequest:
        include = frozenset(data.pop("include", ()))
        low_high = data.pop("rate_range_bpm", None)
        return OptionsRequest(
            include=include,
            rate_range_bpm=None if low_high is None else (low_high[0], low_high[1]),
            **data,
        )


class AnalysisRequestSchema(Schema):
    """Body of ``POST /v1/analyses``.

    Parameters
    ----------
    max_samples
        Cap on the samples of one request, all channels together.
    """

    sampling_rate_hz = StrictFloat(
        required=True,
        validate=Range(min=MIN_FS_HZ, max=MAX_FS_HZ),
        metadata={
            "description": f"Sampling rate of every channel, {MIN_FS_HZ:g}-{MAX_FS_HZ:g} Hz."
        },
    )
    channels = fields.List(
        fields.Nested(ChannelSchema),
        required=True,
        validate=Length(min=1, max=MAX_CHANNELS),
        metadata={"description": f"1 to {MAX_CHANNELS} channels of equal length."},
    )
    subject = fields.Nested(SubjectSchema)
    recording = fields.Nested(RecordingSchema)
    options = fields.Nested(OptionsSchema)

    def __init__(
        self,
        *,
        max_samples: int = DEFAULT_MAX_SAMPLES,
        max_channels: int = MAX_CHANNELS,
        **kwargs: Any,
    ) -> None:
        super().__init__(**kwargs)
        self.max_samples = max_samples
        self.max_channels = max_channels

    @validates_schema
    def _channels_agree(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        channels = data.get("channels") or []
        if len(channels) > self.max_channels:
            raise ValidationError(
                f"`channels` must hold at most {self.max_channels} channels (this service's "
                f"limit); got {len(channels)}.",
                field_name="channels",
            )
        errors: dict[int, dict[str, list[str]]] = {}
        if channels:
            expected = channels[0].samples.size
            seen: dict[str, int] = {}
            for i, channel in enumerate(channels):
                if channel.samples.size != expected:
                    errors.setdefault(i, {})["samples"] = [
                        f"`channels[{i}].samples` must have as many samples as channels[0] "
                        f"({expected}); got {channel.samples.size}."
                    ]
                if channel.label in seen:
                    errors.setdefault(i, {})["label"] = [
                        f"`channels[{i}].label` must be unique; got {channel.label!r}, "
                        f"already used by channels[{seen[channel.label]}]."
                    ]
                seen.setdefault(channel.label, i)
        if errors:
            raise ValidationError({"channels": errors})
        total = sum(channel.samples.size for channel in channels)
        if total > self.max_samples:
            raise ValidationError(
                f"`channels` must hold at most {self.max_samples} samples in total; got {total}.",
                field_name="channels",
            )

    @post_load
    def _make(self, data: dict[str, Any], **kwargs: Any) -> AnalysisRequest:
        return AnalysisRequest(
            sampling_rate_hz=data["sampling_rate_hz"],
            channels=tuple(data["channels"]),
            subject=data.get("subject"),
            recording=data.get("recording"),
            options=data.get("options") or OptionsRequest(),
        )
