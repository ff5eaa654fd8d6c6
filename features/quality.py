"""Quality and occupancy: the usable share of a recording and whether anyone sat on it.

``signal_quality`` summarises the artifact mask (usable fraction, masked segments) with a
confidence; ``occupancy`` combines the two independent pieces of evidence that someone is
on the support, the static load and a repeating heartbeat.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from features.artifacts import ArtifactMask, Segment
from features.beats import BeatDetection
from features.catalogue import REF_OURS, UNIT_INTERVAL, FeatureDefinition, with_tolerance
from features.errors import CLIPPED_SIGNAL, FLAT_SIGNAL, UnusableSignalError
from features.limits import MIN_OCCUPANT_KG, STANDARD_GRAVITY_M_S2

__all__ = [
    "CATALOGUE",
    "OccupancyResult",
    "QualityResult",
    "check_signal_present",
    "occupancy",
    "signal_quality",
]

NO_HEARTBEAT_FACTOR = 0.2
"""Factor on the quality confidence when no repeating heartbeat was found: the unmasked
part may still be noise."""
#: Occupancy confidence when load and heartbeat agree, when only one of them is
#: available, and when they disagree (heuristics from the evidence available, not
#: calibrated probabilities).
BOTH_AGREE_CONFIDENCE = 0.95
ONE_SOURCE_CONFIDENCE = 0.7
DISAGREE_CONFIDENCE = 0.4
CLIPPED_SHARE = 0.5
"""A channel with more than this share of its samples at its own lowest or highest value
is clipped over most of its length."""
_CHUNK = 1 << 20  # samples compared at a time (bounds the temporary boolean arrays)


@dataclass(frozen=True)
class QualityResult:
    """Usable share of the recording and the masked segments."""

    usable_fraction: float
    segments: tuple[Segment, ...]
    confidence: float
    flags: tuple[str, ...]


@dataclass(frozen=True)
class OccupancyResult:
    """Whether someone sat on the support, from the load and the heartbeat.

    Attributes
    ----------
    occupied
        True, False, or None when neither load nor heartbeat can tell.
    supported_mass_kg
        Static load over standard gravity, less the empty load; None without
        force channels.
    from_load, from_heartbeat
        The two independent pieces of evidence (None when not available).
    confidence
        0.95 when both agree, 0.7 when only one is available, 0.4 when they
        disagree (``occupied`` is then True: a heartbeat or a load is there, and the
        flag ``load_and_heartbeat_disagree`` says which evidence is missing), 0.0
        when neither is. Only ``dc`` channels give load evidence.
    """

    occupied: bool | None
    supported_mass_kg: float | None
    from_load: bool | None
    from_heartbeat: bool
    confidence: float
    flags: tuple[str, ...]


def check_signal_present(raw_signals: Sequence[NDArray[np.generic]], *,
                         unloaded: bool = False,
                         ranges: Sequence[tuple[float, float] | None] | None = None) -> None:
    """Raise :class:`UnusableSignalError` when no channel can carry a waveform.

    Parameters
    ----------
    raw_signals
        The channels as received (``ConditionedInput.raw_signals``), equal length.
    unloaded
        True when the static load says nobody is on the support
        (``ConditionedInput.occupancy_from_load`` is False): flat channels are then an
        empty support, a valid answer, and not an error.
    ranges
        Per channel, its (min, max) when known (``ConditionedInput.raw_ranges``; None
        where not), so that the channel is not reduced again for them.

    Raises
    ------
    UnusableSignalError
        ``"flat_signal"`` when every channel takes at most two distinct values (constant,
        or toggling by one quantisation step: a disconnected or stuck sensor) and the
        support is not known to be unloaded;
        ``"clipped_signal"`` when every channel is flat or has more than
        :data:`CLIPPED_SHARE` of its samples at its own lowest or highest value (a
        saturated sensor).

    Notes
    -----
    Both tests read the samples alone, so they hold for any unit, gain or offset. A
    heartbeat or breathing waveform takes many distinct values and reaches its extremes
    only briefly; a channel at the rails for most of the record carries neither, and a
    loaded support never holds perfectly still, since breathing alone moves the body. One
    usable channel is enough: the artifact stage masks a channel's clipped spans, and an
    empty support (a noisy, unloaded sensor) is a valid answer, not an unusable signal.
    """
    known = list(ranges) if ranges else [None] * len(raw_signals)
    shares = [_share_at_extremes(x, span) for x, span in zip(raw_signals, known, strict=True)]
    if all(share is None for share in shares):
        if unloaded:
            return
        raise UnusableSignalError(
            FLAT_SIGNAL, "Every channel is constant or toggles between two values, as from a "
            "disconnected or stuck sensor; no feature can be computed. Check the sensor's "
            "connection and that its samples change with the load.")
    if all(share is None or share > CLIPPED_SHARE for share in shares):
        raise UnusableSignalError(
            CLIPPED_SIGNAL, f"Every channel sits at its lowest or highest value for more than "
            f"{CLIPPED_SHARE:.0%} of its samples, as from a saturated sensor; no feature can be "
            "computed. Lower the gain or use a sensor with a wider range.")


def _share_at_extremes(x: NDArray[np.generic], span: tuple[float, float] | None = None
                       ) -> float | None:
    """Share of the samples equal to the minimum or the maximum (``span`` when given); None
    when those two are all the values (at most two distinct values, a flat channel)."""
    if x.size == 0:
        return None
    low, high = span if span is not None else (x.min(), x.max())
    count = 0
    for start in range(0, x.size, _CHUNK):
        part = x[start:start + _CHUNK]
        count += int(np.count_nonzero((part == low) | (part == high)))
    return None if count == x.size else count / x.size


def signal_quality(mask: ArtifactMask, beats: BeatDetection, *,
                   load_empty_throughout: bool) -> QualityResult:
    """Usable fraction and segments of the artifact mask, with their confidence.

    The confidence is the usable fraction, times :data:`NO_HEARTBEAT_FACTOR` when no
    repeating heartbeat was found. A load that never reached an occupant's level
    (``load_empty_throughout``, see :func:`load_never_occupied`) is named in the flags,
    not masked: the beats are still looked for.
    """
    factor = 1.0 if beats.has_beats else NO_HEARTBEAT_FACTOR
    flags = tuple(mask.flags)
    if load_empty_throughout:
        kept = [f for f in flags if f != "empty_support_not_checked_no_load"]
        flags = (*kept, "load_says_empty_whole_record_not_masked")
    return QualityResult(
        usable_fraction=mask.usable_fraction,
        segments=mask.segments,
        confidence=float(mask.usable_fraction * factor),
        flags=flags,
    )


def load_never_occupied(load_n: NDArray[np.floating] | None) -> bool:
    """True when an occupant load trace exists and never reaches an occupant's weight.

    ``load_n`` is ``ConditionedInput.load_trace_n`` (N, less the empty load; None without
    calibrated ``dc`` force channels). The level is the one the artifact stage masks
    below: :data:`features.limits.MIN_OCCUPANT_KG` times standard gravity.
    """
    if load_n is None or load_n.size == 0:
        return False
    return bool(np.nanmax(load_n) < MIN_OCCUPANT_KG * STANDARD_GRAVITY_M_S2)


def occupancy(from_load: bool | None, mass_kg: float | None,
              beats: BeatDetection) -> OccupancyResult:
    """Whether the support is occupied, from the load decision and the beat detection.

    Parameters
    ----------
    from_load
        Occupied according to the static load, or None without force channels.
    mass_kg
        Supported mass, kg, reported as it is.
    beats
        The beat detection; a repeating heartbeat is evidence of an occupant.
    """
    from_beat = bool(beats.has_beats)
    flags: list[str] = []
    if from_load is None:
        occupied: bool | None = from_beat
        conf = ONE_SOURCE_CONFIDENCE
        flags.append("no_load_information")
    elif from_load == from_beat:
        occupied, conf = from_load, BOTH_AGREE_CONFIDENCE
    else:
        # A heartbeat is direct evidence of an occupant; a load that says "empty"
        # against it (an uncalibrated or partial load) is reported, not trusted. No
        # heartbeat under a load keeps the load's answer. Both with low confidence.
        occupied, conf = True, DISAGREE_CONFIDENCE
        flags.append("load_and_heartbeat_disagree")
    return OccupancyResult(occupied=occupied, supported_mass_kg=mass_kg, from_load=from_load,
                           from_heartbeat=from_beat, confidence=conf, flags=tuple(flags))


CATALOGUE: tuple[FeatureDefinition, ...] = (
    FeatureDefinition("usable_fraction", "quality", None,
                      "Fraction of the recording not masked as movement, another artifact or "
                      "a gap (samples the device lost, with the filters' settling either "
                      "side).",
                      UNIT_INTERVAL, REF_OURS, "quality.usable_fraction", "quality.confidence",
                      (), ("quality.flags",)),
)
"""Catalogue entries of the quality family (see :mod:`features.catalogue`)."""

TOLERANCES: dict[str, tuple[float, str, str]] = {
    "usable_fraction": (0.05, "abs", "five hundredths of the recording"),
}
"""Tolerance of each quality feature: (value, ``"abs"`` or ``"rel"``, why)."""
CATALOGUE = with_tolerance(CATALOGUE, TOLERANCES)
