"""How much a compensator amplifies measurement noise, and how far out its poles sit.

Above the gain crossover the loop no longer attenuates sensor noise: the control
signal sees it through |C(jω)| (u = −C·S·n and |S| ≈ 1 there; Åström & Murray,
*Feedback Systems*, 2008, §12.1, the "gang of four" transfer from noise to control).
The figures here (docs/metrics.md, "Noise figures"):

- ``noise_gain``: sup over ω ≥ ωc of |C(jω)|, the limit ω → ∞ included. For a
  biproper lead, PID·filter or PI this is the high-frequency gain |C(j∞)|; for a
  strictly proper compensator (roll-off) it is the peak between crossover and
  roll-off, which hf_gain (0 there) does not show.
- ``noise_gain_ratio``: noise_gain / |C(jωc)|: how much more the compensator
  amplifies noise than it must to put the crossover where it is (1 for a pure gain).
- ``pole_ratio``: the fastest compensator pole off the origin over ωc — the
  practical limit ``search.max_pole_ratio`` (common practice; docs/explore.md).

The supremum is taken on a log grid from ωc to 10⁴ × the fastest root and refined by
a bounded scalar search around the grid's best point, then compared with the limit at
infinity — exact for the monotone magnitudes of lead, PI and PID·filter designs.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize_scalar

from explorer.core.loop import Rational

__all__ = ["noise_figures", "pole_ratio"]

_GRID_PER_DECADE = 40


def pole_ratio(comp: Rational, wc_rad_s: float | None) -> float | None:
    """max |p| / ωc over the compensator poles off the origin (0.0 when it has none;
    None without a crossover)."""
    if wc_rad_s is None or not wc_rad_s > 0:
        return None
    mags = [abs(p) for p in comp.poles if abs(p) > 0]
    return max(mags) / wc_rad_s if mags else 0.0


def noise_figures(comp: Rational, wc_rad_s: float | None) -> tuple[float | None, float | None]:
    """(noise_gain, noise_gain_ratio) of ``comp`` above the crossover ``wc_rad_s``;
    (None, None) without a crossover or for an improper compensator."""
    if wc_rad_s is None or not wc_rad_s > 0 or not comp.is_proper:
        return None, None
    at_wc = float(abs(comp.freqresp(wc_rad_s)[0]))
    roots = [abs(r) for r in (*comp.zeros, *comp.poles) if abs(r) > 0]
    top = max([wc_rad_s, *roots]) * 1e4
    n = max(int(math.log10(top / wc_rad_s) * _GRID_PER_DECADE), 8)
    w = np.geomspace(wc_rad_s, top, n)
    mag = np.abs(comp.freqresp(w))
    i = int(np.argmax(mag))
    best = float(mag[i])
    if 0 < i < n - 1:  # an interior peak: refine it on log ω
        res = minimize_scalar(
            lambda x: -float(abs(comp.freqresp(10.0**x)[0])),
            bounds=(math.log10(w[i - 1]), math.log10(w[i + 1])),
            method="bounded",
            options={"xatol": 1e-10},
        )
        best = max(best, -float(res.fun))
    hf = comp.hf_gain()
    best = max(best, hf if hf is not None else 0.0)
    return best, (best / at_wc if at_wc > 0 else None)
