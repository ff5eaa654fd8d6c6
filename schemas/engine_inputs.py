"""Typed engine inputs from a validated request: the last step before ``features.analyze``."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from features.conditioning import ChannelInput, CountsScale
from features.engine import Options, Recording, Subject
from schemas.requests import AnalysisRequest


@dataclass(frozen=True)
class EngineCall:
    """Arguments of one ``features.analyze`` call."""

    channels: tuple[ChannelInput, ...]
    fs_hz: float
    subject: Subject | None
    recording: Recording | None
    options: Options


def engine_inputs(request: AnalysisRequest) -> EngineCall:
    """Build the engine's input dataclasses from a validated request."""
    channels = tuple(
        ChannelInput(
            samples=channel.samples,
            label=channel.label,
            quantity=channel.quantity,
            unit=channel.unit,
            counts_scale=None
            if channel.counts_scale is None
            else CountsScale(
                unit=channel.counts_scale.unit,
                per_count=channel.counts_scale.per_count,
                offset_counts=channel.counts_scale.offset_counts,
            ),
            position_m=channel.position_m,
            coupling=channel.coupling,
        )
        for channel in request.channels
    )
    subject = None
    if request.subject is not None:
        subject = Subject(
            body_mass_kg=request.subject.body_mass_kg,
            age_years=request.subject.age_years,
            sex=request.subject.sex,
        )
    recording = None
    if request.recording is not None:
        given = request.recording
        recording = Recording(
            placement=given.placement or Recording.placement,
            posture=given.posture,
            start_time=None if given.start_time is None else given.start_time.isoformat(),
            device_id=given.device_id,
        )
    opts = request.options
    option_values: dict[str, Any] = {"mains_hz": opts.mains_hz}
    if opts.empty_load_kg is not None:
        option_values["empty_load_kg"] = opts.empty_load_kg
    if opts.rate_range_bpm is not None:
        option_values["rate_range_bpm"] = opts.rate_range_bpm
    if "windows" in opts.include:
        option_values["window_s"] = opts.window_s
        option_values["window_overlap_s"] = opts.window_overlap_s
    return EngineCall(
        channels=channels,
        fs_hz=request.sampling_rate_hz,
        subject=subject,
        recording=recording,
        options=Options(**option_values),
    )
