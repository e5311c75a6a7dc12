"""Exit codes of the ``fallcam`` command (INTERFACE.md) and the errors that map onto them."""

from __future__ import annotations

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_USAGE = 2
EXIT_CLIP = 3
EXIT_NO_RESULT = 4


class FallcamError(Exception):
    """A user-facing failure with its exit code and an optional hint line."""

    exit_code = EXIT_INTERNAL

    def __init__(self, message: str, *, hint: str | None = None) -> None:
        super().__init__(message)
        self.hint = hint


class UsageError(FallcamError):
    """Bad command line, rig file or manifest (exit 2)."""

    exit_code = EXIT_USAGE


class ClipUnusableError(FallcamError):
    """Clip missing, unreadable, truncated or unsupported (exit 3)."""

    exit_code = EXIT_CLIP


class NoResultError(FallcamError):
    """Clip readable but no usable sphere track or no plateau (exit 4)."""

    exit_code = EXIT_NO_RESULT
