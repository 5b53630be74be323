"""The one JSON writer of loopscout's outputs (the ``--json`` objects and
``designs.json``): every value made JSON-safe the same way.

Mappings (a frozen DESIGN record included) become objects, non-finite floats null
(docs/interface.md: null = does not exist or infinite),
tuples become lists, numpy scalars become Python numbers and booleans, keys become
strings. ``allow_nan=False`` makes a value that slipped through fail loudly instead
of writing ``NaN`` (which is not JSON)."""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from typing import Any

__all__ = ["json_safe", "json_text"]


def json_safe(obj: Any) -> Any:
    """``obj`` with every value JSON-safe (see the module docstring)."""
    if isinstance(obj, Mapping):  # dicts, read-only views, DESIGN records
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if hasattr(obj, "item"):  # numpy scalar
        obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def json_text(obj: Any, *, indent: int = 2) -> str:
    """The JSON text of ``obj`` (no trailing newline)."""
    return json.dumps(json_safe(obj), indent=indent, allow_nan=False)
