"""A design judged: its DESIGN record and "meets the targets" (:mod:`.records`),
the figures of a model or measured plant (:mod:`.plant_source`) and the worst case over
an uncertain family (:mod:`.family`, :mod:`.family_time`).

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.evaluation.family import worst_of_design
from explorer.evaluation.records import design_metrics, evaluated_record, meets_targets

__all__ = ["evaluated_record", "meets_targets", "design_metrics", "worst_of_design"]
