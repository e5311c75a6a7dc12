"""Exceptions of the tracking stage. Messages are one line: the input, what is wrong, what is expected."""


class ClipError(Exception):
    """The clip is missing, unreadable, truncated beyond use or unsupported (CLI exit code 3)."""


class TrackingError(Exception):
    """The clip was read but gave no usable sphere track (CLI exit code 4)."""
