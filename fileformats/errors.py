"""The one error of the readers: a file that cannot honestly become engine input."""

from __future__ import annotations

from features.errors import InvalidInputError


class UnreadableFileError(InvalidInputError):
    """A file breaks a rule of its format, or the selection asks for what it lacks.

    It is an :class:`features.errors.InvalidInputError` (so a ``ValueError``): the
    service answers it as a 422 naming ``field``.
    """


def optional_module(name: str, fmt: str):  # type: ignore[no-untyped-def]
    """Import the reader library of ``fmt``, or say which extra installs it.

    Raises
    ------
    UnreadableFileError
        When the library is not installed (``pip install 'heartsway[formats]'``).
    """
    import importlib

    try:
        return importlib.import_module(name)
    except ImportError:
        raise UnreadableFileError(
            "file", f"`file` in {fmt} format needs the package {name.split('.')[0]}, which this "
            "installation lacks (pip install 'heartsway[formats]'); got a file of that format."
        ) from None
