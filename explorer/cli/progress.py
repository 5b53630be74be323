"""Progress of a long command on stderr: the command line's display, given to the
exploration as a plain callable (the search itself never prints)."""

from __future__ import annotations

import re
import sys
from typing import Any

__all__ = ["ProgressLine"]


class ProgressLine:
    """Progress messages on ``stream`` (stderr). On a terminal, one line rewritten in
    place; elsewhere (a log file, a pipe) only the messages that end a stage — a
    structure's last "n/n trials" and messages without a count — one per line,
    so a log stays readable. ``close()`` ends an open terminal line."""

    def __init__(self, stream: Any = None) -> None:
        # the stream of this call, not the one of the first import (a default argument
        # would keep a stderr that a caller such as a test harness has since closed)
        stream = sys.stderr if stream is None else stream
        self.stream = stream
        isatty = getattr(stream, "isatty", None)
        self.tty = bool(isatty()) if callable(isatty) else False
        self._open = False

    def __call__(self, line: str) -> None:
        if self.tty:
            self.stream.write("\r" + line[:100].ljust(100))
            self._open = True
        else:
            m = re.search(r"(\d+)/(\d+) (?:trials|iterations)$", line)
            if m is not None and m.group(1) != m.group(2):
                return
            self.stream.write(line + "\n")
        self.stream.flush()

    def close(self) -> None:
        if self._open:
            self.stream.write("\n")
            self.stream.flush()
            self._open = False
