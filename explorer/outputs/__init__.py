"""What a person reads: the offline HTML report and its charts. Renders records; never
searches.

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.outputs.report import write_report

__all__ = ["write_report"]
