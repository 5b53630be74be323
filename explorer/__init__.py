"""loopscout: explore compensator structures for one feedback loop.

The numerical core (:mod:`explorer.loop`, :mod:`explorer.metrics`,
:mod:`explorer.timeresp`, :mod:`explorer.specs`) is pure functions on numpy arrays.
"""

from explorer.loop import LoopBatch, Rational

__all__ = ["LoopBatch", "Rational"]
__version__ = "0.1.0"
