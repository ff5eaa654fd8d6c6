"""Motion and artifact masking: which parts of a fused trace can be trusted.

``mask_artifacts`` finds body movement, posture changes, clipping, flat lines and
an empty support, masks the samples the device lost (gaps), and returns them as
sorted, merged :class:`Segment` objects plus a per-sample ``usable`` mask. Every
threshold is relative to the recording's own robust level (median and MAD), so
multiplying the input by any constant gives the same mask; the only physical
threshold is the occupant mass bound for the load.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features._checks import check_sampling_rate, check_trace
from features._numeric import (
    MAD_TO_SD,
    count_in,
    lane_median,
    median_1d,
    robust_sd,
    runs,
    std,
    windows,
)
from features.errors import InvalidInputError
from features.filters import FloatArray, block_factor, block_means, highpass
from features.gaps import GAP_PAD_S
from features.limits import MIN_DURATION_S, MIN_OCCUPANT_KG, STANDARD_GRAVITY_M_S2

KINDS = ("movement", "posture_change", "clipping", "flat_line", "empty_support", "gap")

#: Envelope: 0.25 s blocks, averaged over 1 s (about one beat), above 0.5 Hz.
_ENV_BLOCK_S = 0.25
_ENV_SPAN_BLOCKS = 4
_ENV_HIGHPASS_HZ = 0.5
#: Movement must at least double the envelope RMS (+6 dB) whatever the MAD says.
_MIN_MOVEMENT_RATIO = 2.0
#: A window is decisive for the confidence when 1.5x away from the threshold.
_DECISIVE_RATIO = 1.5
#: Posture: 1 s windowed medians of 0.1 s block means, 5 windows on each side.
_POSTURE_WINDOW_S = 1.0
_POSTURE_SIDE_WINDOWS = 5
_POSTURE_MIN_SPREADS = 2.0
#: Near-zero variance: block std below this fraction of the median block std (-80 dB).
_FLAT_STD_RATIO = 1.0e-4
#: Clipping: at least 3 samples (and 3 ms) at the channel's extreme value.
_MIN_CLIP_SAMPLES = 3
_MIN_CLIP_S = 0.003
#: Clipping runs shorter than this are brief: the tip of a wave cut off, flagged but not
#: masked. Half the I-J-K complex (~0.1 s, Inan et al. 2015) stays for template timing.
_BRIEF_CLIP_S = 0.05
#: A raw channel more than half flat or clipped is dead, not an event (if others live).
_DEAD_CHANNEL_FRACTION = 0.5
_CHUNK_SAMPLES = 1 << 16
"""Samples per step of :func:`_block_std`: its temporaries stay in cache (numpy 2.4,
x86-64: 75,000 samples in blocks of 32, 72 us against 119 us in steps of 8192 samples)."""


@dataclass(frozen=True)
class Segment:
    """A masked stretch of the record: ``kind`` (one of ``KINDS``), start and end in s."""

    kind: str
    start_s: float
    end_s: float


@dataclass(frozen=True)
class ArtifactMask:
    """Masked segments and the per-sample usable mask.

    Attributes
    ----------
    usable
        (n,) bool, False inside any segment.
    usable_fraction
        Fraction of samples usable, [0, 1].
    segments
        Merged per kind, sorted by start time.
    movement_threshold_ratio
        Movement threshold over the median 1 s envelope (dimensionless); None when the
        trace is all flat.
    confidence
        Fraction of 1 s envelope windows at least 1.5x away from the movement threshold
        (how decisively rest and movement separate), [0, 1].
    flags
        Adaptations and skipped checks.
    """

    usable: NDArray[np.bool_]
    usable_fraction: float
    segments: tuple[Segment, ...]
    movement_threshold_ratio: float | None
    confidence: float
    flags: tuple[str, ...]

    def motion_only(self, fs_hz: float) -> NDArray[np.bool_]:
        """(n,) bool: True where a sample is masked for movement or a posture step alone.

        Samples inside a clipping, flat-line or empty-support segment are never True: only
        motion can leave the beats under it intact (see ``features.beats.detect_beats``,
        ``recoverable``). Segment ``[start_s, end_s)`` covers samples
        ``round(start_s * fs_hz)`` up to ``round(end_s * fs_hz)``.
        """
        n = self.usable.size
        motion = np.zeros(n, dtype=bool)
        other = np.zeros(n, dtype=bool)
        for seg in self.segments:
            a = max(0, int(round(seg.start_s * fs_hz)))
            b = min(n, int(round(seg.end_s * fs_hz)))
            (motion if seg.kind in ("movement", "posture_change") else other)[a:b] = True
        out: NDArray[np.bool_] = motion & ~other & ~self.usable
        return out


def mask_artifacts(fused: ArrayLike, fs_hz: float, *, load_n: ArrayLike | None = None,
                   load_fs_hz: float | None = None,
                   raw_signals: Sequence[ArrayLike] | None = None,
                   min_occupant_kg: float = MIN_OCCUPANT_KG, movement_k: float = 5.0,
                   pad_s: float = 1.0, min_flat_s: float = 0.25,
                   gap: ArrayLike | None = None, gap_pad_s: float = GAP_PAD_S,
                   raw_ranges: Sequence[tuple[float, float] | None] | None = None
                   ) -> ArtifactMask:
    """Mask movement, posture changes, clipping, flat lines, an empty support and gaps.

    Parameters
    ----------
    fused
        (n,) fused trace (``FusionResult.fused``), finite, at least ``MIN_DURATION_S``.
    fs_hz
        Sampling rate, Hz, within ``features.limits.MIN_FS_HZ`` to ``MAX_FS_HZ``.
    load_n
        Occupant load trace in N (``ConditionedInput.load_trace_n``), or None to skip
        the empty-support check.
    load_fs_hz
        Rate of ``load_n``, Hz (``ConditionedInput.baseline_fs_hz``); may be omitted when
        ``load_n`` is at ``fs_hz`` (length n). Sample ``k`` covers
        ``[k / load_fs_hz, (k + 1) / load_fs_hz)`` s.
    raw_signals
        Per channel, the samples as received (``ConditionedInput.raw_signals``), each of
        length n, any units; used for clipping, flat lines and posture steps. When None,
        those checks run on ``fused``.
    min_occupant_kg
        The support is empty where the load is below this mass times g, kg (> 0).
    movement_k
        Movement threshold in robust standard deviations of the log envelope (> 0).
    pad_s
        Padding added to each side of movement and empty-support segments, s (>= 0).
    min_flat_s
        Shortest flat line, s (0.01 to 10).
    gap
        (n,) bool, True where samples were missing and filled
        (``ConditionedInput.gap``), or None when none were.
    gap_pad_s
        Padding added to each side of a gap, s (>= 0; :data:`features.gaps.GAP_PAD_S`).
    raw_ranges
        Per raw channel, its (min, max) when known (``ConditionedInput.raw_ranges``; None
        where not): a finite range shows the channel finite and gives its extremes, so
        the channel is not reduced again for them.

    Returns
    -------
    ArtifactMask

    Raises
    ------
    InvalidInputError
        Bad shapes, non-finite samples, too short a record, or out-of-range options.

    Notes
    -----
    1. Flat lines, per raw channel (or ``fused``): runs of identical samples of at
       least ``min_flat_s``, and runs of two or more blocks of ``min_flat_s / 2``
       whose standard deviation is below 1e-4 of the median block standard
       deviation. Runs at the channel's extreme value count as clipping;
       runs shorter than ``_BRIEF_CLIP_S`` (a wave tip cut off) are flagged
       (``brief_clipping_not_masked``), not masked, since the rest of the complex
       still times the beat.
    2. Clipping: runs of at least 3 samples (and 3 ms) exactly at the channel's
       maximum or minimum. A channel more than half flat or clipped is reported as
       dead and not masked, unless no channel is live.
    3. Empty support: ``load_n < min_occupant_kg * g``, padded by ``pad_s``.
    4. Movement: block means to about 100 Hz, high-pass 0.5 Hz, mean square in
       0.25 s blocks, averaged over 1 s, log RMS. Over the blocks not already
       flat or empty, threshold = median + max(k * ``MAD_TO_SD`` * MAD, ln 2). With a
       Gaussian null, k = 5 gives a false-alarm probability of 2.9e-7 per window,
       i.e. < 0.02 expected false windows in 8 h of 0.25 s blocks; real envelopes
       have heavier tails, which is why k is not lower. The ln 2 floor (RMS at
       least doubled) keeps very stationary records from being masked for tiny
       fluctuations. Runs above threshold are padded by ``pad_s``.
    5. Posture changes, per raw channel (or the load, or ``fused``): medians of 1 s
       windows of 0.1 s block means; at each window boundary the difference ``D``
       between the medians of the 5 windows after and the 5 windows before. A step
       is where ``|D - median(D)|`` exceeds max(k * ``MAD_TO_SD`` * MAD(D), 2 x the median
       within-window spread) and, at the run's peak, the step is larger than 2x the
       spread of the window medians on either side (a step between two stable
       levels, not a swing during movement). Near a step several boundaries see the
       same difference, so the segment is not the run of them: the step is placed at
       the first window (of the two 5-window blocks at the run's peak) whose median is
       nearer the level after than the level before, and the segment covers that window
       and the one before it, any neighbouring windows whose median is more than a
       quarter of the step from both levels (the body still shifting), and half a
       window on either side: about 3 s around a sharp step. The data on either side
       stay usable at their own level (the step itself is what would bias a beat or a
       breath), and the movement detector masks the motion that usually comes with it.
    6. Gaps: runs of ``gap``, padded by ``gap_pad_s`` (the filters' settling next to the
       filled line). They are excluded from the movement statistics like flat and empty
       spans, and a segment of another kind lying wholly inside a padded gap (the held
       ends of a fill look flat) is dropped: the gap is the reason there.

    All steps are vectorised (reshaped blocks, sliding windows); the cost is linear
    in the record length.

    References
    ----------
    .. [1] P. J. Rousseeuw and C. Croux, "Alternatives to the median absolute
       deviation", Journal of the American Statistical Association, 88(424),
       1273-1283, 1993. DOI 10.1080/01621459.1993.10476408.
    """
    fs = check_sampling_rate(fs_hz)
    x = check_trace(fused, name="fused", fs_hz=fs, min_duration_s=MIN_DURATION_S)
    n = x.shape[0]
    ranges = _check_ranges(raw_ranges, raw_signals)
    raws = _check_raw(raw_signals, n, ranges)
    load, load_factor = _check_load(load_n, load_fs_hz, fs, n)
    k = _positive("movement_k", movement_k)
    pad = _positive("pad_s", pad_s, allow_zero=True)
    min_flat = _positive("min_flat_s", min_flat_s)
    if not 0.01 <= min_flat <= 10.0:
        raise InvalidInputError("min_flat_s", "`min_flat_s` must be between 0.01 and 10 s; got "
                                f"{min_flat:g}.")
    occupant_kg = _positive("min_occupant_kg", min_occupant_kg)
    gaps = _gap_spans(gap, n, int(round(_positive("gap_pad_s", gap_pad_s, allow_zero=True) * fs)))

    flags: list[str] = ["gaps_masked"] if gaps else []
    spans: list[tuple[str, int, int]] = list(gaps)
    sources: list[NDArray[np.generic]] = list(raws) if raws is not None else [x]
    if raws is None:
        flags.append("clipping_and_flat_checked_on_fused")
    # ranges is empty where the fused trace stands in for the raw channels
    spans += _flat_and_clipping(sources, fs, min_flat, flags, ranges)
    if load is not None:
        spans += _empty_support(load, load_factor, occupant_kg * STANDARD_GRAVITY_M_S2,
                                int(round(pad * fs)), n)
    else:
        flags.append("empty_support_not_checked_no_load")
    move, ratio, conf = _movement(x, fs, k, int(round(pad * fs)), spans, flags)
    spans += move
    if raws is not None:
        posture_sources: list[tuple[NDArray[np.generic], int]] = [(r, 1) for r in raws]
    elif load is not None:
        posture_sources = [(load, load_factor)]
        flags.append("posture_from_load_trace")
    else:
        posture_sources = [(x, 1)]
        flags.append("posture_from_fused")
    src_factor = posture_sources[0][1]
    spans += _posture([src for src, _ in posture_sources], fs / src_factor, src_factor, k, n)

    segments, usable = _assemble(_outside_gaps(spans, gaps, n), n, fs)
    return ArtifactMask(usable=usable, usable_fraction=float(usable.mean()),
                        segments=segments, movement_threshold_ratio=ratio,
                        confidence=conf, flags=tuple(flags))


# ----------------------------------------------------------------------------- validation


def _check_finite(field: str, x: NDArray[np.generic]) -> None:
    if x.dtype.kind == "f" and not np.isfinite(x).all():
        bad = ~np.isfinite(x)
        raise InvalidInputError(field, f"`{field}` must be finite (no NaN or inf); got "
                                f"{int(np.count_nonzero(bad))} non-finite sample(s), the first "
                                f"at index {int(np.argmax(bad))}.")


def _check_ranges(raw_ranges: Sequence[tuple[float, float] | None] | None,
                  raw_signals: Sequence[ArrayLike] | None) -> list[tuple[float, float] | None]:
    """The known (min, max) per raw channel (None where unknown), one per raw channel."""
    count = 0 if raw_signals is None else len(raw_signals)
    if not raw_ranges:
        return [None] * count
    if len(raw_ranges) != count:
        raise InvalidInputError("raw_ranges", f"`raw_ranges` must hold one (min, max) or None "
                                f"per raw channel ({count}); got {len(raw_ranges)}.")
    return [None if r is None else (float(r[0]), float(r[1])) for r in raw_ranges]


def _check_raw(raw_signals: Sequence[ArrayLike] | None, n: int,
               ranges: list[tuple[float, float] | None]) -> list[NDArray[np.generic]] | None:
    if raw_signals is None:
        return None
    out = []
    for i, r in enumerate(raw_signals):
        arr = np.asarray(r)
        field = f"raw_signals[{i}]"
        if arr.ndim != 1 or arr.shape[0] != n or arr.dtype.kind not in "iuf":
            raise InvalidInputError(field, f"`{field}` must be a real 1-D array of {n} samples "
                                    f"(the length of fused); got shape {arr.shape}.")
        span = ranges[i]
        # a NaN or an infinity would be the range's end (min and max carry both through)
        if span is None or not (math.isfinite(span[0]) and math.isfinite(span[1])):
            _check_finite(field, arr)
        out.append(arr)
    if not out:
        raise InvalidInputError("raw_signals", "`raw_signals` must hold at least one channel or "
                                "be None; got an empty sequence.")
    return out


def _check_load(load_n: ArrayLike | None, load_fs_hz: float | None, fs: float, n: int
                ) -> tuple[FloatArray | None, int]:
    if load_n is None:
        return None, 1
    load = np.asarray(load_n, dtype=np.float64)
    if load.ndim != 1 or load.shape[0] < 2:
        raise InvalidInputError("load_n", f"`load_n` must be a 1-D array; got shape {load.shape}.")
    _check_finite("load_n", load)
    rate = fs if load_fs_hz is None else float(load_fs_hz)
    ratio = fs / rate if rate > 0 else math.inf
    factor = int(round(ratio))
    if not (math.isfinite(ratio) and factor >= 1 and abs(ratio - factor) < 1e-6):
        raise InvalidInputError("load_fs_hz", "`load_fs_hz` must divide fs_hz by a whole number "
                                f"of samples; got {load_fs_hz!r} at fs_hz={fs:g}.")
    if abs(load.shape[0] * factor - n) > 2 * factor + 1:
        raise InvalidInputError("load_n", f"`load_n` must cover the record ({n / fs:g} s at "
                                f"{rate:g} Hz, about {n // factor} samples); got "
                                f"{load.shape[0]} samples.")
    return load, factor


def _gap_spans(gap: ArrayLike | None, n: int, pad: int) -> list[tuple[str, int, int]]:
    if gap is None:
        return []
    g = np.asarray(gap)
    if g.shape != (n,) or g.dtype != np.bool_:
        raise InvalidInputError("gap", f"`gap` must be a boolean array of {n} samples (the "
                                f"length of fused) or None; got shape {g.shape} and dtype "
                                f"{g.dtype}.")
    starts, ends = runs(g)
    return [("gap", max(0, int(a) - pad), min(n, int(b) + pad))
            for a, b in zip(starts, ends, strict=True)]


def _outside_gaps(spans: list[tuple[str, int, int]], gaps: list[tuple[str, int, int]],
                  n: int) -> list[tuple[str, int, int]]:
    """``spans`` without the segments of other kinds that lie wholly inside a gap."""
    if not gaps:
        return spans
    inside = np.zeros(n + 1, dtype=np.int64)
    for _, a, b in gaps:
        inside[a] += 1
        inside[b] -= 1
    covered = count_in(np.cumsum(inside)[:n] > 0, [a for _, a, _ in spans],
                       [b for _, _, b in spans])
    return [(k, a, b) for (k, a, b), c in zip(spans, covered, strict=True)
            if k == "gap" or c < b - a]


def _positive(field: str, value: object, *, allow_zero: bool = False) -> float:
    ok = not isinstance(value, bool) and isinstance(value, (int, float, np.integer, np.floating))
    v = float(value) if ok else math.nan  # type: ignore[arg-type]
    if not math.isfinite(v) or v < 0.0 or (v == 0.0 and not allow_zero):
        rule = ">= 0" if allow_zero else "> 0"
        raise InvalidInputError(field, f"`{field}` must be a finite number {rule}; got {value!r}.")
    return v


# ----------------------------------------------------------------------------- kernels


def _block_std(x: NDArray[np.generic], length: int) -> FloatArray:
    """Standard deviation of consecutive blocks of ``length`` samples, chunked.

    ``numpy.std`` of each block to rounding, from the sums of the deviations ``d`` from the
    block's first sample (the shifted-data form of the variance: ``(sum d^2 - (sum d)^2 /
    L) / L``, both sums by ``numpy.einsum`` along the short block axis), in chunks of about
    ``_CHUNK_SAMPLES`` samples whose temporaries stay in cache. A constant block has every
    ``d`` exactly 0 and gives exactly 0. Shifting by a sample of the block keeps the
    cancellation of the two sums to the ratio of that sample's distance from the block's
    mean to its spread, so the rounding stays near that of the two-pass form (chosen over
    it: one pass over the samples fewer than centring twice, and no block means).
    """
    m = x.shape[0] // length
    out = np.empty(m)
    step = max(1, _CHUNK_SAMPLES // length)
    for b0 in range(0, m, step):
        b1 = min(m, b0 + step)
        chunk = np.asarray(x[b0 * length: b1 * length], dtype=np.float64).reshape(-1, length)
        dev = chunk - chunk[:, :1]
        total = np.einsum("ij->i", dev)
        square = np.einsum("ij,ij->i", dev, dev)
        total *= total
        total /= length
        square -= total
        np.maximum(square, 0.0, out=square)
        square /= length
        np.sqrt(square, out=out[b0:b1])
    return out


def _flat_and_clipping(sources: list[NDArray[np.generic]], fs: float, min_flat_s: float,
                       flags: list[str],
                       ranges: Sequence[tuple[float, float] | None] | None = None
                       ) -> list[tuple[str, int, int]]:
    per_channel: list[list[tuple[str, int, int]]] = []
    min_clip = max(_MIN_CLIP_SAMPLES, int(math.ceil(_MIN_CLIP_S * fs)))
    brief_clip = max(min_clip + 1, int(math.ceil(_BRIEF_CLIP_S * fs)))
    n_brief = 0
    min_run = max(2, int(math.ceil(min_flat_s * fs)))
    blk = max(2, int(math.ceil(0.5 * min_flat_s * fs)))
    for src, span in zip(sources, ranges or [None] * len(sources), strict=True):
        n = src.shape[0]
        hi, lo = (span[1], span[0]) if span is not None else (src.max(), src.min())
        spans: list[tuple[str, int, int]] = []
        if hi == lo:
            per_channel.append([("flat_line", 0, n)])
            continue
        # Runs of equal samples, [start, end): a clipped stretch (at least min_clip >= 3
        # samples) is such a run at the trace's maximum or minimum, and a flat line one
        # elsewhere, so one pass finds both.
        starts, ends = runs(src[1:] == src[:-1])
        ends = ends + 1
        for extreme in (hi, lo):
            keep = (src[starts] == extreme) & (ends - starts >= min_clip)
            brief = keep & (ends - starts < brief_clip)
            if brief.any():
                n_brief += int(brief.sum())
            keep &= ~brief
            spans += [("clipping", int(a), int(b)) for a, b in zip(starts[keep], ends[keep],
                                                                    strict=True)]
        keep = ends - starts >= min_run
        for a, b in zip(starts[keep], ends[keep], strict=True):
            if src[a] != hi and src[a] != lo:
                spans.append(("flat_line", int(a), int(b)))
        std = _block_std(src, blk)
        ref = median_1d(std)
        quiet = std <= _FLAT_STD_RATIO * ref
        starts, ends = runs(quiet)
        keep = ends - starts >= 2
        spans += [("flat_line", int(a) * blk, int(b) * blk)
                  for a, b in zip(starts[keep], ends[keep], strict=True)
                  if src[a * blk] != hi and src[a * blk] != lo]
        per_channel.append(spans)
    if n_brief:
        flags.append("brief_clipping_not_masked")
    covered = [_covered_fraction(s, sources[0].shape[0]) for s in per_channel]
    live = [c <= _DEAD_CHANNEL_FRACTION for c in covered]
    out: list[tuple[str, int, int]] = []
    for i, spans in enumerate(per_channel):
        if not live[i] and any(live):
            flags.append(f"channels[{i}]_mostly_flat_or_clipped_ignored")
            continue
        out += spans
    return out


def _covered_fraction(spans: list[tuple[str, int, int]], n: int) -> float:
    """Share of the ``n`` samples inside at least one span (their union, in order)."""
    covered, reach = 0, 0
    for a, b in sorted((max(0, a), min(n, b)) for _, a, b in spans):
        if b > max(a, reach):
            covered += b - max(a, reach)
            reach = b
    return covered / n


def _empty_support(load: FloatArray, factor: int, level_n: float, pad: int, n: int
                   ) -> list[tuple[str, int, int]]:
    starts, ends = runs(load < level_n)
    return [("empty_support", max(0, int(a) * factor - pad), min(n, int(b) * factor + pad))
            for a, b in zip(starts, ends, strict=True)]


def _movement(x: FloatArray, fs: float, k: float, pad: int,
              known: list[tuple[str, int, int]], flags: list[str]
              ) -> tuple[list[tuple[str, int, int]], float | None, float]:
    factor = block_factor(fs, 100.0)
    fs_a = fs / factor
    hp = highpass(block_means(x, factor), fs_a, _ENV_HIGHPASS_HZ)
    blk = max(1, int(round(_ENV_BLOCK_S * fs_a)))
    m = hp.shape[0] // blk
    rows = hp[: m * blk].reshape(m, blk)
    ms = np.einsum("ij,ij->i", rows, rows) / blk
    env = np.sqrt(np.convolve(ms, np.ones(_ENV_SPAN_BLOCKS) / _ENV_SPAN_BLOCKS, mode="same"))
    top = float(env.max()) if m else 0.0
    if top <= 0.0:
        flags.append("movement_not_checked_flat_trace")
        return [], None, 0.0
    log_env = np.log(np.maximum(env, top * 1e-12))
    include = np.ones(m, dtype=bool)
    samples_per_block = blk * factor
    for _, a, b in known:
        include[a // samples_per_block: -(-b // samples_per_block)] = False
    if include.sum() < max(8, m // 10):
        include[:] = True
        flags.append("movement_statistics_over_whole_record")
    ref = log_env[include]
    med = median_1d(ref)
    sigma = robust_sd(ref)
    margin = max(k * sigma, math.log(_MIN_MOVEMENT_RATIO))
    if k * sigma < math.log(_MIN_MOVEMENT_RATIO):
        flags.append("movement_threshold_floor_used")
    threshold = med + margin
    decisive = np.abs(ref - threshold) >= math.log(_DECISIVE_RATIO)
    starts, ends = runs(log_env > threshold)
    spans = [("movement", max(0, int(a) * samples_per_block - pad),
              min(x.shape[0], int(b) * samples_per_block + pad))
             for a, b in zip(starts, ends, strict=True)]
    return spans, float(math.exp(margin)), float(decisive.mean())


def _posture(sources: list[NDArray[np.generic]], src_fs: float, src_factor: int, k: float,
             n: int) -> list[tuple[str, int, int]]:
    """Steps between stable levels in windowed medians of block means, per source (traces
    of one length), source after source.

    The statistics of all sources are taken as rows of one array (per row the same
    numbers as for that source alone: every step works along the last axis).
    """
    factor = block_factor(src_fs, 10.0)
    blocks = np.stack([block_means(src, factor) for src in sources])
    width = max(1, int(round(_POSTURE_WINDOW_S * src_fs / factor)))
    count = blocks.shape[1] // width
    side = _POSTURE_SIDE_WINDOWS
    if count < 2 * side + 1:
        return []
    wins = blocks[:, : count * width].reshape(len(sources), count, width)
    med = lane_median(wins)
    spread = lane_median(std(wins, axis=2))
    side_view = windows(med, side)
    side_med = lane_median(side_view)
    side_mad = MAD_TO_SD * lane_median(np.abs(side_view - side_med[..., None]))
    d = side_med[:, side:] - side_med[:, :-side]          # boundary j = side .. count - side
    dev = np.abs(d - lane_median(d)[:, None])
    sigma = np.asarray(robust_sd(d, axis=1))
    samples_per_window = width * factor * src_factor
    out = []
    for row in range(len(sources)):
        threshold = max(k * float(sigma[row]), _POSTURE_MIN_SPREADS * float(spread[row]))
        dev_r = dev[row]
        if threshold <= 0.0:
            threshold = math.inf if not dev_r.any() else float(dev_r[dev_r > 0].min()) / 2.0
        starts, ends = runs(dev_r > threshold)
        for a, b in zip(starts, ends, strict=True):
            peak = int(a + np.argmax(dev_r[a:b]))
            before, after = side_mad[row, peak], side_mad[row, peak + side]
            if dev_r[peak] <= _POSTURE_MIN_SPREADS * max(before, after):
                continue
            first, last = _transition_windows(med[row], side_med[row], peak, side)
            t0 = first * samples_per_window - samples_per_window // 2
            t1 = (last + 1) * samples_per_window + samples_per_window // 2
            out.append(("posture_change", max(0, t0), min(n, t1)))
    return out


def _transition_windows(med: NDArray[np.float64], side_med: NDArray[np.float64], peak: int,
                        side: int) -> tuple[int, int]:
    """First and last 1-s window of the step detected at boundary ``peak``.

    The detecting boundary compares the block of ``side`` windows from ``peak`` (level
    L0) with the next block (level L1); near a clean step several boundaries see the
    same difference, so the step itself is placed at the first window of the two
    blocks whose median is nearer L1 than L0. The windows on either side of it whose
    median is farther than a quarter of the step from both levels are in transition
    and are kept too; at least the two windows meeting at the step are returned.
    """
    seg = med[peak : peak + 2 * side]
    level0, level1 = float(side_med[peak]), float(side_med[peak + side])
    nearer_after = np.abs(seg - level1) < np.abs(seg - level0)
    step = int(np.argmax(nearer_after)) if nearer_after.any() else side
    step = min(max(step, 1), seg.size - 1)
    tol = 0.25 * abs(level1 - level0)
    between = (np.abs(seg - level0) > tol) & (np.abs(seg - level1) > tol)
    first, last = step - 1, step
    while first > 0 and between[first - 1]:
        first -= 1
    while last < seg.size - 1 and between[last + 1]:
        last += 1
    return peak + first, peak + last


def _assemble(spans: list[tuple[str, int, int]], n: int, fs: float
              ) -> tuple[tuple[Segment, ...], NDArray[np.bool_]]:
    usable = np.ones(n, dtype=bool)
    merged: list[tuple[str, int, int]] = []
    for kind in KINDS:
        own = sorted((a, b) for kk, a, b in spans if kk == kind and b > a)
        cur: list[int] | None = None
        for a, b in own:
            if cur is not None and a <= cur[1]:
                cur[1] = max(cur[1], b)
                continue
            if cur is not None:
                merged.append((kind, cur[0], cur[1]))
            cur = [a, b]
        if cur is not None:
            merged.append((kind, cur[0], cur[1]))
    merged.sort(key=lambda s: (s[1], s[2], KINDS.index(s[0])))
    for _, a, b in merged:
        usable[a:b] = False
    segments = tuple(Segment(kind, a / fs, b / fs) for kind, a, b in merged)
    return segments, usable
