"""Time-domain figures of a loop with its delay: exact step and load responses
(:mod:`.timeresp`) and the sampled loop between samples (:mod:`.sampled_step`).

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.time_domain.timeresp import simulate_steps, step_metrics, step_metrics_batch

__all__ = ["step_metrics", "step_metrics_batch", "simulate_steps"]
