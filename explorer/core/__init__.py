"""The vocabulary every layer shares: errors, rational transfer functions and their
roots (:mod:`.loop`), the one metric list (:mod:`.metric_registry`), the JSON writer and
the safety caution. Imports nothing else of the package.

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.core.caution import CAUTION
from explorer.core.errors import DesignError, LoopscoutError, StudyFileError
from explorer.core.factored import factored
from explorer.core.json_text import json_text
from explorer.core.loop import LoopBatch, Rational
from explorer.core.metric_registry import METRIC_KEYS, METRICS

__all__ = [
    "LoopscoutError",
    "StudyFileError",
    "DesignError",
    "Rational",
    "LoopBatch",
    "METRICS",
    "METRIC_KEYS",
    "CAUTION",
    "json_text",
    "factored",
]
