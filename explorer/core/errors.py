"""The one exception family of loopscout."""

from __future__ import annotations

__all__ = ["LoopscoutError", "StudyFileError", "DesignError"]


class LoopscoutError(Exception):
    """Base class: anything the command line turns into one line and exit status 2."""


class StudyFileError(LoopscoutError):
    """A study file is unreadable or invalid. ``key`` is the dotted key path."""

    def __init__(self, key: str, message: str) -> None:
        self.key = key
        self.message = message
        super().__init__(f"`{key}` {message}" if key else message)


class DesignError(LoopscoutError):
    """A design request that cannot be carried out (reason in the message)."""
