"""loopscout: explore compensator structures for one feedback loop.

Layers, lowest first (docs/architecture.md): :mod:`explorer.core`, :mod:`explorer.model`,
:mod:`explorer.frequency`, :mod:`explorer.time_domain`, :mod:`explorer.design`,
:mod:`explorer.evaluation`, :mod:`explorer.outputs`, :mod:`explorer.search`,
:mod:`explorer.cli`. The numerical core is pure functions on numpy arrays.
"""

from explorer.core.loop import LoopBatch, Rational

__all__ = ["LoopBatch", "Rational"]
__version__ = "0.1.0"
