"""Exceptions raised by the feature engine.

``EngineError`` is the base. ``InvalidInputError`` (also a ``ValueError``)
means the caller sent something that breaks a documented rule; it names the
argument in ``field``. ``UnusableSignalError`` means the input is valid but
carries no usable signal (for example every sample is masked as movement).
Messages follow one template: name the argument, state the rule with units,
give the value received, and say how to fix it when that helps.
"""

from __future__ import annotations


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
    """The input is well formed but holds no signal the engine can use."""

    def __init__(self, reason: str, message: str) -> None:
        super().__init__(message)
        self.reason = reason
        self.message = message
