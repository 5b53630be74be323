"""Design methods: compensator structures balanced at the crossover
(:mod:`.structures`), the phase-balanced hand designs (:mod:`.hand_designs`) and the
balance on the sampled loop (:mod:`.sampled_design`).

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from explorer.design.hand_designs import hand_designs
from explorer.design.structures import Structure, candidate_structures

__all__ = ["Structure", "candidate_structures", "hand_designs"]
