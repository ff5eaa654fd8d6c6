"""What real sensors deliver: front ends applied to a simulated recording.

The simulator (``simulation.simulate``) delivers calibrated force in N, static load
included, from load cells that carry the whole weight. Most real sensors do not: a film
(piezoelectric) sensor answers the rate of change of force, a pad or an AC-coupled
amplifier forgets the static level, a strain strip under one leg sees part of the
weight, a front end counts in units nobody told the user about, and the complex can
carry two waves of comparable size. Each function here is pure: arrays in, arrays out,
no randomness; ``sensor_trace`` chains them into one named kind of sensor.

These are for validation only (issue 12, item 6) and stay out of the engine.

References
----------
.. [1] Inan OT, Migeotte PF, Park KS, et al. Ballistocardiography and seismocardiography:
   a review of recent advances. IEEE J Biomed Health Inform 19(4):1414-1427, 2015.
   doi:10.1109/JBHI.2014.2361732 (sensor kinds: film, pneumatic and hydraulic pads, strain
   gauges under a bed leg, accelerometers).
.. [2] Sadek I, Biswas J, Abdulrazak B. Ballistocardiogram signal processing: a review.
   Health Inf Sci Syst 7:10, 2019. doi:10.1007/s13755-019-0071-7 (from memory: breathing
   and posture dominate the raw trace of bed sensors).

A piezoelectric element read by a voltage amplifier is a charge source into a resistance:
its output is a first-order high-pass of the force, ``tau dF/dt`` well below the corner
(common practice; any sensor handbook's piezoelectric chapter).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import signal

# The base simulator still lives in features/ on this branch; it moves to this package.
from simulation import SimulatedRecording

FloatArray = NDArray[np.float64]

SENSOR_KINDS = ("ac_coupled", "film", "one_corner", "swings", "two_waves", "uncalibrated")
"""Kinds of sensor ``sensor_trace`` can deliver, sorted."""


@dataclass(frozen=True)
class SensorTrace:
    """One channel as a real sensor would deliver it, with what a user could say about it.

    ``samples`` in ``unit`` of ``quantity``; ``coupling`` ``"ac"`` when the sensor does not
    carry the occupant's whole static weight in a calibrated unit.
    """

    samples: FloatArray
    quantity: str
    unit: str
    coupling: str
    kind: str


def uncalibrated_counts(x: FloatArray, *, counts_per_unit: float,
                        offset_counts: float) -> FloatArray:
    """Integer counts of an unknown scale and offset: ``round(x * gain + offset)``."""
    return np.round(np.asarray(x, dtype=np.float64) * counts_per_unit + offset_counts)


def ac_coupled(x: FloatArray, fs_hz: float, *, corner_hz: float) -> FloatArray:
    """First-order analogue high-pass (an RC coupling), causal as in hardware.

    The bilinear transform of ``s / (s + 2 pi f_c)``; the static level and the slow part
    of the load are lost, the cardiac band (above about 1 Hz) passes.
    """
    b, a = signal.butter(1, corner_hz, btype="highpass", fs=fs_hz)
    x = np.asarray(x, dtype=np.float64)
    zi = signal.lfilter_zi(b, a) * x[0]
    out, _ = signal.lfilter(b, a, x, zi=zi)
    return np.asarray(out, dtype=np.float64)


def film_response(x: FloatArray, fs_hz: float, *, time_constant_s: float) -> FloatArray:
    """A film (piezoelectric) sensor read in voltage mode: ``tau * dF/dt``.

    The charge follows the force; through the input resistance of a voltage amplifier it
    leaks away with time constant ``tau``, so well below ``1 / (2 pi tau)`` the output is
    ``tau`` times the rate of change of force (central differences here).
    """
    return time_constant_s * np.gradient(np.asarray(x, dtype=np.float64), 1.0 / fs_hz)


def second_wave(x: FloatArray, fs_hz: float, *, template: FloatArray, template_fs_hz: float,
                j_index: int, j_times_s: FloatArray, delay_s: float, gain: float,
                stretch: float = 1.6) -> FloatArray:
    """Add a second wave to every complex: the beat template ``stretch`` times broader,
    its J wave ``delay_s`` after each beat's J, with a peak-to-peak ``gain`` times the
    template's.

    A complex with two comparable waves (a second recoil path through a bed frame, or a
    sensor that sees a later, broader swing as large as the J wave): the trap that makes
    a peak picker count each beat twice. The second wave is broader than the first (a
    slower path), so the two waves of one complex differ in shape; an exact copy of the
    first at half the beat period could not be told from a beat by any method.
    """
    out = np.asarray(x, dtype=np.float64).copy()
    tpl = np.asarray(template, dtype=np.float64)
    # The stretched template on the output grid, its J at offset 0.
    lo = -j_index / template_fs_hz * stretch
    hi = (tpl.size - 1 - j_index) / template_fs_hz * stretch
    offs = np.arange(int(np.floor(lo * fs_hz)), int(np.ceil(hi * fs_hz)) + 1)
    wave = np.interp(offs / fs_hz / stretch * template_fs_hz + j_index,
                     np.arange(tpl.size), tpl, left=0.0, right=0.0)
    span = float(np.ptp(wave))
    if span <= 0.0:
        return out
    wave *= gain * float(np.ptp(tpl)) / span
    for tj in np.asarray(j_times_s, dtype=np.float64):
        idx = offs + int(round((tj + delay_s) * fs_hz))
        ok = (idx >= 0) & (idx < out.size)
        out[idx[ok]] += wave[ok]
    return out


def slow_swings(x: FloatArray, breathing_l: FloatArray, cardiac: FloatArray, fs_hz: float, *,
                ratio: float, posture_times_s: tuple[float, ...] = ()) -> FloatArray:
    """Breathing and posture swings ``ratio`` times the cardiac wave's peak-to-peak size.

    The lung volume (the simulator's truth) is scaled so that its peak-to-peak is ``ratio``
    times that of the cardiac component; each posture time adds a step of the same size
    with a 0.5 s raised-cosine edge, alternating in sign.
    """
    span = float(np.ptp(cardiac))
    vol = np.asarray(breathing_l, dtype=np.float64)
    vol_span = float(np.ptp(vol))
    out = np.asarray(x, dtype=np.float64).copy()
    if vol_span > 0.0:
        out += ratio * span * (vol - vol.mean()) / vol_span
    t = np.arange(out.size) / fs_hz
    for k, t0 in enumerate(posture_times_s):
        edge = np.clip((t - t0) / 0.5, 0.0, 1.0)
        out += (-1.0) ** k * ratio * span * 0.5 * (1.0 - np.cos(np.pi * edge))
    return out


def sensor_trace(rec: SimulatedRecording, kind: str, *, ratio: float = 30.0) -> SensorTrace:
    """One channel of ``rec`` as the named kind of sensor delivers it.

    Parameters
    ----------
    rec
        A simulated force recording (one channel, or four corner cells for ``one_corner``).
    kind
        One of ``SENSOR_KINDS``: ``uncalibrated`` (counts of unknown scale and offset,
        17.3 counts per N and 8 million counts offset, the static level then reads as no
        plausible weight in any unit), ``ac_coupled`` (0.3 Hz RC coupling, in counts),
        ``film`` (``tau dF/dt`` with tau 0.05 s, AC-coupled at 0.1 Hz, in counts),
        ``one_corner`` (the first corner cell alone, uncalibrated), ``two_waves`` (a second,
        broader wave 0.9 times the first, 0.3 s later, AC-coupled), ``swings`` (breathing and two
        posture swings ``ratio`` times the cardiac wave, uncalibrated).
    ratio
        Size of the swings for ``swings``, times the cardiac peak-to-peak (up to 30).

    Returns
    -------
    SensorTrace
    """
    if kind not in SENSOR_KINDS:
        raise ValueError(f"`kind` must be one of {', '.join(SENSOR_KINDS)}; got {kind!r}.")
    fs = rec.fs_hz
    truth = rec.truth
    total = np.sum(np.asarray(rec.channels, dtype=np.float64), axis=0)
    cardiac = np.asarray(truth.cardiac_signal, dtype=np.float64)

    def counts(x: FloatArray) -> FloatArray:
        return uncalibrated_counts(x, counts_per_unit=17.3, offset_counts=8.0e6)

    if kind == "uncalibrated":
        x = counts(total)
    elif kind == "ac_coupled":
        x = counts(ac_coupled(total, fs, corner_hz=0.3))
    elif kind == "film":
        x = counts(ac_coupled(film_response(total, fs, time_constant_s=0.05), fs,
                              corner_hz=0.1))
    elif kind == "one_corner":
        x = counts(np.asarray(rec.channels[0], dtype=np.float64))
    elif kind == "two_waves":
        tpl = truth.template
        assert tpl is not None  # an occupied recording has a beat template
        echo = second_wave(total, fs, template=tpl.samples, template_fs_hz=tpl.fs_hz,
                           j_index=tpl.j_index, j_times_s=truth.j_times_s, delay_s=0.3,
                           gain=0.9)
        x = counts(ac_coupled(echo, fs, corner_hz=0.3))
    else:
        d = rec.settings.duration_s
        x = counts(slow_swings(total, truth.breathing_l, cardiac, fs, ratio=ratio,
                               posture_times_s=(d / 3.0, 2.0 * d / 3.0)))
    return SensorTrace(samples=x, quantity="force", unit="counts", coupling="ac", kind=kind)
