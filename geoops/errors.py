"""The one error hierarchy of rutwise.

Every error a user can cause derives from :class:`RutwiseError` and carries a ``hint``: the
next thing the user should do. Adapters (the CLI, the HTTP service) print or map these; they
never show a traceback for them. This module must not import anything heavy.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path


class RutwiseError(Exception):
    """Base class of all errors that a user's input or request can cause.

    Parameters
    ----------
    message
        What is wrong, in one sentence.
    hint
        What to do about it, in one sentence.
    """

    #: short machine-readable kind, used in problem-details ``type`` URIs
    kind = "rutwise-error"

    def __init__(self, message: str, hint: str = "") -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return f"{self.message} {self.hint}".strip() if self.hint else self.message


class BadInput(RutwiseError):
    """The input file or value cannot be read or holds nothing usable."""

    kind = "bad-input"


class CrsError(BadInput):
    """The coordinate reference system is missing, unknown, or does not fit the coordinates."""

    kind = "crs-error"


class LimitExceeded(RutwiseError):
    """The input is larger than a configured limit allows."""

    kind = "limit-exceeded"


class NotEstimable(RutwiseError):
    """A quantity cannot be estimated from the geometry given (e.g. too straight, too short)."""

    kind = "not-estimable"


@contextmanager
def writing_to(path: str | Path) -> Iterator[None]:
    """Turn an operating-system error while writing ``path`` into a user error with a hint.

    Examples
    --------
    >>> try:
    ...     with writing_to("/no/such/folder/out.gpkg"):
    ...         open("/no/such/folder/out.gpkg", "w")
    ... except RutwiseError as exc:
    ...     print(exc.hint)
    Name an output file in a folder you can write to with -o.
    """
    try:
        yield
    except OSError as exc:
        raise RutwiseError(
            f"Cannot write {str(path)!r} ({exc.strerror or type(exc).__name__}).",
            "Name an output file in a folder you can write to with -o.",
        ) from None
