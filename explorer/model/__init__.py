"""What the user gives: the study file read and validated (:mod:`.study`), requirement
conversions (:mod:`.specs`), a measured sweep and its fitted model, and the members of an
uncertain plant family. Imports only :mod:`explorer.core`.

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.model.measured_plant import MeasuredPlant
from explorer.model.specs import targets_from_requirements
from explorer.model.study import Study, load_study, parse_study
from explorer.model.sweep import MeasuredResponse, read_sweep

__all__ = [
    "Study",
    "load_study",
    "parse_study",
    "targets_from_requirements",
    "MeasuredResponse",
    "read_sweep",
    "MeasuredPlant",
]
