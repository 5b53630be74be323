"""The safety caution shown by every command and in every report."""

from __future__ import annotations

__all__ = ["CAUTION"]

CAUTION = (
    "Caution: results are model-based. Validate on the real system with limits and "
    "interlocks in place; defer to applicable codes, standards and licensed practice."
)
