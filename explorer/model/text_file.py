"""Reading a user's text file safely: a regular file of bounded size, UTF-8, BOM removed.

Used for study files, measured sweeps and the files given to ``report --designs`` and
``implement --from`` (docs/hostile-input.md). Every failure is a
:class:`explorer.core.errors.StudyFileError` with a one-line message.
"""

from __future__ import annotations

import json
import os
import stat

from explorer.core.errors import StudyFileError

__all__ = ["MAX_FILE_BYTES", "read_text_file", "show_path", "is_control", "one_line"]

#: Largest study file read (bytes); a study is a few hundred bytes to a few kB.
MAX_FILE_BYTES = 1 << 20


def read_text_file(path: str | os.PathLike[str], what: str) -> str:
    """The UTF-8 text of a regular file of at most MAX_FILE_BYTES, BOM removed.

    ``what`` names the file in messages ("study file"). Anything else — a missing
    file, a directory, a FIFO or device (refused before opening, so nothing blocks),
    a file too large, bytes that are not UTF-8 — raises :class:`StudyFileError`
    with an empty key and a one-line message.
    """
    source = os.fspath(path)
    shown = show_path(source)
    try:
        st = os.stat(source)
        if stat.S_ISDIR(st.st_mode):
            raise StudyFileError("", f"cannot read {what} {shown}: it is a directory")
        if not stat.S_ISREG(st.st_mode):
            raise StudyFileError(
                "", f"cannot read {what} {shown}: not a regular file ({_file_kind(st.st_mode)})"
            )
        if st.st_size > MAX_FILE_BYTES:
            raise StudyFileError(
                "",
                f"cannot read {what} {shown}: {st.st_size} bytes, "
                f"larger than the limit of {MAX_FILE_BYTES} bytes",
            )
        flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
        fd = os.open(source, flags)
        with os.fdopen(fd, "rb") as fh:
            if not stat.S_ISREG(os.fstat(fh.fileno()).st_mode):  # swapped since the stat
                raise StudyFileError("", f"cannot read {what} {shown}: not a regular file")
            raw = fh.read(MAX_FILE_BYTES + 1)
    except StudyFileError:
        raise
    except OSError as exc:
        reason = exc.strerror or type(exc).__name__
        raise StudyFileError("", f"cannot read {what} {shown}: {reason}") from None
    except ValueError as exc:  # e.g. an embedded NUL byte in the path
        raise StudyFileError("", f"cannot read {what} {shown}: {one_line(str(exc))}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise StudyFileError(
            "", f"cannot read {what} {shown}: larger than the limit of {MAX_FILE_BYTES} bytes"
        )
    if raw.startswith(b"\xef\xbb\xbf"):  # a UTF-8 byte-order mark, as some editors write
        raw = raw[3:]
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise StudyFileError(
            "", f"{shown}: not UTF-8 text ({exc.reason} at byte {exc.start})"
        ) from None


def _file_kind(mode: int) -> str:
    for test, name in (
        (stat.S_ISFIFO, "a FIFO"),
        (stat.S_ISCHR, "a character device"),
        (stat.S_ISBLK, "a block device"),
        (stat.S_ISSOCK, "a socket"),
    ):
        if test(mode):
            return name
    return "not a file"


def show_path(source: str) -> str:
    """A path for a message: as given, or quoted and escaped when it holds control
    characters or NUL (so the message stays one harmless line)."""
    if any(is_control(ch) for ch in source):
        return json.dumps(source)
    return source


def is_control(ch: str) -> bool:
    o = ord(ch)
    return o < 0x20 or 0x7F <= o < 0xA0 or ch in "\u2028\u2029"


def one_line(text: str) -> str:
    """``text`` with every run of whitespace (newlines included) made one space."""
    return " ".join(text.split())
