"""Write studies/data/hopper_gate_sweep.csv: an INVENTED scenario, not a measurement.

The scenario: the slide gate under a grain hopper is positioned by a small geared
motor through a long linkage. A stepped-sine sweep of the motor drive (input: drive
command, output: gate position) from 0.05 Hz to 30 Hz, 15 points per decade, with the
coherence of each step. The "true" plant below is made up for the example; noise and
coherence are synthetic (seeded), larger where the response is small.

    P(s) = K · wn² / (s (s + a) (s² + 2 ζ wn s + wn²)) · e^(−s τ)
    K = 40, a = 2.5 rad/s, wn = 25 rad/s, ζ = 0.15, τ = 0.03 s

Run from the repository root: ``python studies/data/make_gate_sweep.py``.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from explorer.core.loop import Rational
from explorer.model.sweep import read_sweep

K, A_RAD_S, WN_RAD_S, ZETA, DELAY_S = 40.0, 2.5, 25.0, 0.15, 0.03
SEED = 20261204
OUT = Path(__file__).with_name("hopper_gate_sweep.csv")


def true_plant() -> Rational:
    """The invented model the data are drawn from."""
    wd = WN_RAD_S * math.sqrt(1 - ZETA**2)
    mode = (complex(-ZETA * WN_RAD_S, wd), complex(-ZETA * WN_RAD_S, -wd))
    return Rational(gain=K * WN_RAD_S**2, poles=(0.0, -A_RAD_S, *mode), delay_s=DELAY_S)


def frequencies_hz() -> np.ndarray:
    decades = math.log10(30.0 / 0.05)
    return np.logspace(math.log10(0.05), math.log10(30.0), int(round(15 * decades)) + 1)


def make() -> str:
    rng = np.random.default_rng(SEED)
    f_hz = frequencies_hz()
    w = 2 * math.pi * f_hz
    plant = true_plant()
    resp = plant.freqresp(w)
    phase = plant.phase_rad(w)
    # coherence falls where the output is small (signal-to-noise), floor 0.4
    level_db = 20 * np.log10(np.abs(resp))
    coh = np.clip(0.99 - 0.012 * np.maximum(0.0, -level_db - 10.0), 0.4, 0.99)
    coh = np.round(coh - 0.01 * rng.random(w.size), 3)
    # relative noise grows as the coherence falls
    sigma = 0.004 + 0.05 * (1 - coh)
    e = sigma * (rng.standard_normal(w.size) + 1j * rng.standard_normal(w.size)) / math.sqrt(2)
    noisy = np.abs(resp) * np.abs(1 + e)
    ph = phase + np.angle(1 + e)
    lines = [
        "# INVENTED example data (studies/data/make_gate_sweep.py), not a measurement:",
        "# hopper slide gate, drive command -> gate position, stepped sine sweep",
        "frequency_hz,magnitude_db,phase_deg,coherence",
    ]
    for fh, m, p, c in zip(f_hz, noisy, ph, coh, strict=True):
        lines.append(f"{fh:.6g},{20 * math.log10(m):.4f},{math.degrees(p):.3f},{c:.3f}")
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    OUT.write_text(make())
    data = read_sweep(OUT, shown=OUT.name)  # the file must pass its own validation
    print(f"wrote {OUT.name}: {data.omega_rad_s.size} points, "
          f"{len(data.low_coherence_rows())} below coherence 0.6")
