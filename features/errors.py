"""Exceptions raised by the feature engine.

``EngineError`` is the base. ``InvalidInputError`` (also a ``ValueError``)
means the caller sent something that breaks a documented rule; it names the
argument in ``field``. ``UnusableSignalError`` means the input is valid but
carries no signal from which any feature can honestly be computed, as the trace itself
shows; its ``reason`` is one of :data:`UNUSABLE_REASONS`. An empty support is not such a
case: it is a valid answer (not occupied).
Messages follow one template: name the argument, state the rule with units,
give the value received, and say how to fix it when that helps.
"""

from __future__ import annotations

FLAT_SIGNAL = "flat_signal"
"""Every channel is constant or toggles between two values (a disconnected or stuck sensor)."""
CLIPPED_SIGNAL = "clipped_signal"
"""Every channel sits at its own lowest or highest value for most of the recording (a
saturated sensor), or is flat."""
UNUSABLE_REASONS = (CLIPPED_SIGNAL, FLAT_SIGNAL)
"""The reasons an :class:`UnusableSignalError` gives, sorted."""


class EngineError(Exception):
    """Base class of every error the engine raises on purpose."""


class InvalidInputError(EngineError, ValueError):
    """An argument breaks a documented rule.

    Parameters
    ----------
    field
        Dotted name of the offending argument, for example ``"channels[1].unit"``.
    message
        Full sentence: the rule, the value received and how to fix it.
    """

    def __init__(self, field: str, message: str) -> None:
        super().__init__(message)
        self.field = field
        self.message = message


class UnusableSignalError(EngineError):
    """The input is well formed but holds no signal the engine can use.

    Parameters
    ----------
    reason
        One of :data:`UNUSABLE_REASONS`.
    message
        Full sentence: what the trace shows and what to check.
    """

    def __init__(self, reason: str, message: str) -> None:
        super().__init__(message)
        self.reason = reason
        self.message = message
