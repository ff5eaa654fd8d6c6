"""Input checks shared by the stages, in the way of scikit-learn's ``check_array``.

Each helper validates one kind of argument, returns it in the form the kernels want
(a float, a float64 array), and raises :class:`features.errors.InvalidInputError` with
the one message template of the engine: name the argument, state the rule with units,
give the value received ("`fs_hz` must be between 50 and 2000 Hz; got 20.").
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features.errors import InvalidInputError
from features.limits import MAX_CHANNELS, MAX_FS_HZ, MIN_FS_HZ

__all__ = [
    "check_2d", "check_between", "check_sampling_rate", "check_trace", "check_usable",
    "finite_where",
]


def check_sampling_rate(fs_hz: object, *, name: str = "fs_hz", low: float = MIN_FS_HZ,
                        high: float = MAX_FS_HZ) -> float:
    """Return ``fs_hz`` as a float, or raise unless ``low <= fs_hz <= high`` (Hz).

    Parameters
    ----------
    fs_hz
        The sampling rate received, Hz.
    name
        Argument name used in the message.
    low, high
        Accepted range, Hz; by default the engine's input rates
        (:data:`features.limits.MIN_FS_HZ` to :data:`features.limits.MAX_FS_HZ`). Stages
        that work on decimated series (breathing, modulation) pass their own lower bound.

    Raises
    ------
    InvalidInputError
        When ``fs_hz`` is not a real number, or not finite and inside the range.
    """
    if isinstance(fs_hz, bool) or not isinstance(fs_hz, (int, float, np.integer, np.floating)):
        raise InvalidInputError(name, f"`{name}` must be a number of Hz; got {fs_hz!r}.")
    fs = float(fs_hz)
    if not (math.isfinite(fs) and low <= fs <= high):
        raise InvalidInputError(name, f"`{name}` must be between {low:g} and {high:g} Hz; "
                                      f"got {fs:g}.")
    return fs


def check_between(value: object, *, name: str, low: float, high: float, unit: str) -> float:
    """Return ``value`` as a float, or raise unless it is finite and in ``[low, high]``.

    Parameters
    ----------
    value
        The number received.
    name
        Argument name used in the message.
    low, high
        Inclusive bounds, in ``unit``.
    unit
        Unit symbol written after the bounds (``"kg"``, ``"s"``, ``"%"``).

    Raises
    ------
    InvalidInputError
        When ``value`` is not a real number, not finite or outside the bounds.
    """
    try:
        out = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise InvalidInputError(name, f"`{name}` must be a number of {unit}; got {value!r}.") \
            from None
    if not (math.isfinite(out) and low <= out <= high):
        raise InvalidInputError(name, f"`{name}` must be between {low:g} and {high:g} {unit}; "
                                      f"got {value}.")
    return out


def check_trace(trace: ArrayLike, *, name: str = "trace", fs_hz: float | None = None,
                min_duration_s: float | None = None, min_samples: int = 0,
                finite: bool = True) -> NDArray[np.float64]:
    """Return ``trace`` as a 1-D float64 array, or raise.

    Parameters
    ----------
    trace
        The samples received.
    name
        Argument name used in the messages.
    fs_hz
        Sampling rate, Hz; needed with ``min_duration_s``.
    min_duration_s
        Shortest duration accepted, s (None: no rule).
    min_samples
        Fewest samples accepted.
    finite
        Whether every sample must be finite (callers that mask samples check the
        unmasked ones themselves).

    Raises
    ------
    InvalidInputError
        When the trace is not 1-D, does not hold real numbers (integers or floats), is too
        short, or holds NaN or infinity.
    """
    raw = np.asarray(trace)
    if raw.ndim != 1:
        raise InvalidInputError(name, f"`{name}` must be 1-D; got shape {raw.shape}.")
    if raw.dtype.kind not in "iuf":
        raise InvalidInputError(name, f"`{name}` must hold real numbers; got dtype {raw.dtype}.")
    x = np.asarray(raw, dtype=np.float64)
    if min_duration_s is not None and fs_hz is not None and x.size < min_duration_s * fs_hz:
        raise InvalidInputError(
            name, f"`{name}` must be at least {min_duration_s:g} s long; "
                  f"got {x.size / fs_hz:.2f} s.")
    if x.size < min_samples:
        raise InvalidInputError(name, f"`{name}` must hold at least {min_samples} samples; "
                                      f"got {x.size}.")
    if finite and not np.all(np.isfinite(x)):
        bad = ~np.isfinite(x)
        raise InvalidInputError(name, f"`{name}` must hold finite numbers only; got "
                                      f"{int(np.count_nonzero(bad))} NaN or inf, the first at "
                                      f"index {int(np.argmax(bad))}.")
    return x


def check_2d(signals: ArrayLike, fs_hz: float, *, name: str = "signals",
             min_duration_s: float = 0.0) -> NDArray[np.float64]:
    """Return ``signals`` as a (channels, n) float64 array, or raise.

    A 1-D array is one channel. Every sample must be finite.

    Parameters
    ----------
    signals
        (channels, n) or (n,) real samples.
    fs_hz
        Sampling rate, Hz (for the duration rule).
    name
        Argument name used in the messages; rows are named ``name[i]``.
    min_duration_s
        Shortest duration accepted, s.

    Raises
    ------
    InvalidInputError
        When the array is not real and 1-D or 2-D, holds no or more than
        :data:`features.limits.MAX_CHANNELS` rows, is too short, or a row holds NaN or
        infinity.
    """
    x = np.asarray(signals)
    if x.ndim == 1:
        x = x[None, :]
    if x.ndim != 2 or x.dtype.kind not in "iuf":
        raise InvalidInputError(name, f"`{name}` must be a real (n_channels, n) array; got "
                                      f"shape {x.shape} and dtype {x.dtype}.")
    if not 1 <= x.shape[0] <= MAX_CHANNELS:
        raise InvalidInputError(name, f"`{name}` must hold 1 to {MAX_CHANNELS} channels; "
                                      f"got {x.shape[0]}.")
    if x.shape[1] / fs_hz < min_duration_s:
        raise InvalidInputError(name, f"`{name}` must span at least {min_duration_s:g} s; "
                                      f"got {x.shape[1] / fs_hz:g} s.")
    x = np.asarray(x, dtype=np.float64)
    for i, row in enumerate(x):
        # A row sum is finite exactly when every sample is (short of overflow), and
        # needs no full-size temporary.
        if not math.isfinite(float(row.sum())):
            raise InvalidInputError(f"{name}[{i}]", f"`{name}[{i}]` must be finite (no NaN "
                                    f"or inf); got {int(np.count_nonzero(~np.isfinite(row)))} "
                                    "non-finite values.")
    return x


def finite_where(x: NDArray[np.float64], usable: NDArray[np.bool_]) -> bool:
    """True when every sample of ``x`` where ``usable`` is True is finite.

    The whole trace is tested first (no copy); only a trace that holds a non-finite
    sample is tested again under the mask. Selecting the usable samples first copied
    them, which cost about sixty times the test itself on an hour at 250 Hz.
    """
    finite = np.isfinite(x)
    return bool(finite.all() or finite[usable].all())


def check_usable(usable: ArrayLike | None, n: int, *, of: str) -> NDArray[np.bool_]:
    """Return the usable-sample mask as booleans of length ``n`` (all True when None).

    Parameters
    ----------
    usable
        True where a sample may be used, or None.
    n
        Length of the trace the mask goes with.
    of
        Name of that trace, for the message.

    Raises
    ------
    InvalidInputError
        When the mask is not 1-D of length ``n``.
    """
    if usable is None:
        return np.ones(n, dtype=bool)
    mask = np.asarray(usable, dtype=bool)
    if mask.shape != (n,):
        raise InvalidInputError(
            "usable", f"`usable` must have the length of `{of}` ({n}); got {mask.size}.")
    return mask
