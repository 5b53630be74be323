"""Non-dominated sorting against a small case worked by hand (Deb et al. 2002,
NSGA-II, §III-A definition of Pareto fronts)."""

from __future__ import annotations

import numpy as np

from explorer.search.ranking import non_dominated_fronts, rank_designs


def test_fronts_hand_worked() -> None:
    x = np.array([[1, 5], [2, 3], [4, 1], [3, 4], [5, 5], [2, 3]], float)
    # front 0: (1,5) (2,3) (4,1) (2,3)dup; front 1: (3,4); front 2: (5,5)
    assert non_dominated_fronts(x).tolist() == [0, 0, 0, 1, 2, 0]


def _d(
    name: str, origin: str, order: int, ms: float, hf: float, iae: float, meets: bool = True
) -> dict:
    return {
        "name": name,
        "origin": origin,
        "structure": "x",
        "order": order,
        "meets_targets": meets,
        "metrics": {"sensitivity_peak": ms, "hf_gain": hf, "iae_load": iae},
    }


def test_rank_designs_dominance_of_hand_designs() -> None:
    ds = [
        _d("hand A", "hand", 2, 1.6, 10.0, 2.0),
        _d("opt 1", "optimized", 2, 1.4, 9.0, 1.5),
        _d("opt 2", "optimized", 1, 1.9, 1.0, 5.0),
        _d("opt bad", "optimized", 1, 1.0, 1.0, 1.0, meets=False),
    ]
    f = rank_designs(ds).set_index("name")
    assert f.loc["opt 1", "dominates_hand"] == ["hand A"]
    assert f.loc["opt 2", "dominates_hand"] == []
    assert (
        bool(f.loc["opt 1", "pareto"])
        and bool(f.loc["opt 2", "pareto"])
        and not bool(f.loc["hand A", "pareto"])
    )
    assert not bool(f.loc["opt bad", "pareto"])  # not meeting targets: not ranked
    assert list(rank_designs(ds)["name"])[-1] == "opt bad"
