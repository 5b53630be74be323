"""Pareto ranking of designs and the design table (pandas).

Non-dominated sorting (Deb et al., "A fast and elitist multiobjective genetic
algorithm: NSGA-II", IEEE TEC 6(2), 2002, §III-A) over compensator order, Ms,
noise gain (explorer.frequency.noise: sup |C(jω)| above crossover, which unlike hf_gain does not
read 0 for a roll-off) and iae_load, all minimised. Only designs meeting the targets
and limits take part in the fronts; hand designs and the study's own designs are
reference points: each optimized design lists the ones it dominates.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

__all__ = ["RANK_KEYS", "non_dominated_fronts", "rank_designs", "dominates"]

#: Origins of the reference designs an optimized design is compared with.
REFERENCE_ORIGINS = ("hand", "phase-balanced", "given")
#: The criteria of the ranking, all minimised.
RANK_KEYS = ("order", "sensitivity_peak", "noise_gain", "iae_load")


def _rank_value(r: dict[str, Any], k: str) -> Any:
    """A row's ranking figure: its worst over the plant family where it has one."""
    w = f"worst_{k}"
    return r[w] if w in r else r.get(k)


def _matrix(rows: list[dict[str, Any]]) -> np.ndarray:
    m = np.array(
        [[float("nan") if _rank_value(r, k) is None else float(_rank_value(r, k))
          for k in RANK_KEYS] for r in rows],
        float,
    )
    return np.where(np.isnan(m), np.inf, m).reshape(len(rows), len(RANK_KEYS))


def dominates(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``out[i, j]``: row i of ``a`` dominates row j of ``b`` (≤ everywhere, < somewhere)."""
    le = np.all(a[:, None, :] <= b[None, :, :], axis=2)
    lt = np.any(a[:, None, :] < b[None, :, :], axis=2)
    return le & lt


def non_dominated_fronts(x: np.ndarray) -> np.ndarray:
    """Front number (0 = non-dominated) of each row of ``x`` (n, k), minimised."""
    n = x.shape[0]
    front = np.full(n, -1)
    if n == 0:
        return front
    dom = dominates(x, x)
    count = dom.sum(axis=0)
    level = 0
    left = np.ones(n, bool)
    while left.any():
        cur = left & (count == 0)
        if not cur.any():  # cannot happen for a strict partial order; guard anyway
            front[left] = level
            break
        front[cur] = level
        left &= ~cur
        count = count - dom[cur].sum(axis=0)
        level += 1
    return front


def rank_designs(designs: list[dict[str, Any]]) -> pd.DataFrame:
    """One row per DESIGN dict (metrics as columns), sorted: designs meeting the
    targets first by front, order, Ms; then the rest. Columns ``front`` (None for
    designs not meeting), ``pareto``, ``dominates_hand`` (names)."""
    rows = []
    for d in designs:
        row = {
            "name": d["name"],
            "origin": d["origin"],
            "structure": d["structure"],
            "order": d["order"],
            "meets_targets": d.get("meets_targets"),
        }
        for k, v in d["metrics"].items():
            if k != "crossovers_rad_s":
                row[k] = v
        for k, v in (d.get("worst") or {}).items():
            row[f"worst_{k}"] = v
        rows.append(row)
    frame = pd.DataFrame(rows)
    if frame.empty:
        return pd.DataFrame(
            columns=[
                "name",
                "origin",
                "structure",
                "order",
                "meets_targets",
                "front",
                "pareto",
                "dominates_hand",
                *RANK_KEYS[1:],
            ]
        )
    meets = np.array([bool(r["meets_targets"]) for r in rows])
    x = _matrix(rows)
    front = np.full(len(rows), -1)
    idx = np.flatnonzero(meets)
    front[idx] = non_dominated_fronts(x[idx])
    hand = np.array([r["origin"] in REFERENCE_ORIGINS for r in rows])
    dom = dominates(x, x)
    names = np.array([r["name"] for r in rows], dtype=object)
    dom_hand: list[list[str]] = []
    for i in range(len(rows)):
        if rows[i]["origin"] != "optimized" or not meets[i]:
            dom_hand.append([])
            continue
        dom_hand.append([str(n) for n in names[dom[i] & hand]])
    frame["front"] = pd.array([int(f) if f >= 0 else None for f in front], dtype="Int64")
    frame["pareto"] = front == 0
    frame["dominates_hand"] = dom_hand
    frame["_sort"] = np.where(meets, front, 10**6)
    frame["_ms"] = [_rank_value(r, "sensitivity_peak") for r in rows]
    frame = (
        frame.sort_values(
            ["_sort", "order", "_ms", "name"], kind="stable", na_position="last"
        )
        .drop(columns=["_sort", "_ms"])
        .reset_index(drop=True)
    )
    return frame
