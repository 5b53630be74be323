"""Frequency-domain figures of a loop: crossovers, margins, peaks and the Nyquist count
for batches of designs (:mod:`.metrics`), on a measured sweep (:mod:`.on_data`), for the
sampled loop (:mod:`.sampled`, :mod:`.sampled_batch`) and the noise gain.

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.frequency.metrics import frequency_metrics, frequency_metrics_batch
from explorer.frequency.on_data import loop_metrics_on_data
from explorer.frequency.sampled import SampledPlant

__all__ = ["frequency_metrics", "frequency_metrics_batch", "loop_metrics_on_data", "SampledPlant"]
