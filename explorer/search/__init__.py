"""The exploration: Optuna tuning of each structure (:mod:`.tune`), exact refinement,
ranking, the recommended answer and the pipeline that writes the result files
(:mod:`.exploration`).

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.search.exploration import ExploreResult, explore

__all__ = ["explore", "ExploreResult"]
