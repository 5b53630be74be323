"""An independent reference evaluator for loop metrics, built only from scipy.

It shares no code with :mod:`explorer.frequency.metrics`: the rational part comes from
``scipy.signal.freqresp`` on the zeros-poles-gain form, the delay is applied as
exp(−jωτ), events are located on a dense log grid (``points`` per decade) and refined
by ``scipy.optimize.brentq``; peaks by ``scipy.optimize.minimize_scalar`` around the
dense-grid maximum. Slow by design — a cross-check, not a product.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, signal

from explorer.core.loop import Rational


def _response(loop: Rational):
    z = np.array(loop.zeros, dtype=complex)
    p = np.array(loop.poles, dtype=complex)
    sys = signal.ZerosPolesGain(z, p, loop.gain)

    def f(w):
        w = np.atleast_1d(np.asarray(w, dtype=float))
        _, h = signal.freqresp(sys, w)
        return h * np.exp(-1j * w * loop.delay_s)

    return f


def reference_metrics(loop: Rational, w_lo: float = 1e-4, w_hi: float = 1e4, points: int = 20000):
    """crossovers, PM (deg), GM (dB), phase crossover, delay margin, Ms, Mt."""
    f = _response(loop)
    decades = math.log10(w_hi / w_lo)
    w = np.logspace(math.log10(w_lo), math.log10(w_hi), int(decades * points))
    h = f(w)
    mag = np.abs(h)
    # gain crossovers
    g = np.log(mag)
    idx = np.flatnonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)
    wc = [
        optimize.brentq(lambda x: math.log(abs(f(x)[0])), w[k], w[k + 1], xtol=1e-15, rtol=1e-15)
        for k in idx
    ]
    pms = []
    for x in wc:
        pm = math.degrees(np.angle(f(x)[0])) + 180.0
        pms.append(pm - 360.0 if pm > 180.0 else pm)
    # phase crossovers: Im L = 0 with Re L < 0
    im = h.imag
    idx = np.flatnonzero(
        (np.sign(im[:-1]) * np.sign(im[1:]) < 0) & (h.real[:-1] < 0) & (h.real[1:] < 0)
    )
    wp = [
        optimize.brentq(lambda x: f(x)[0].imag, w[k], w[k + 1], xtol=1e-15, rtol=1e-15)
        for k in idx
    ]
    gms = [(-20.0 * math.log10(abs(f(x)[0])), x) for x in wp if abs(f(x)[0]) < 1.0]
    gm, wpc = min(gms) if gms else (None, None)

    def peak(values, fun):
        k = int(np.argmax(values))
        lo, hi = w[max(k - 2, 0)], w[min(k + 2, len(w) - 1)]
        res = optimize.minimize_scalar(
            lambda x: -fun(x), bounds=(lo, hi), method="bounded", options={"xatol": 1e-12 * hi}
        )
        return max(-res.fun, float(values[k]))

    s_abs = 1.0 / np.abs(1.0 + h)
    t_abs = mag / np.abs(1.0 + h)
    ms = peak(s_abs, lambda x: 1.0 / abs(1.0 + f(x)[0]))
    mt = peak(t_abs, lambda x: abs(f(x)[0]) / abs(1.0 + f(x)[0]))
    # the limits ω → 0 and ω → ∞ (docs/interface.md), approximated far outside the grid
    ends = f(np.array([w_lo * 1e-8, w_hi * 1e8]))
    ms = max(ms, *(1.0 / np.abs(1.0 + ends)))
    mt = max(mt, *(np.abs(ends) / np.abs(1.0 + ends)))
    if pms:
        i = int(np.argmin(pms))
        dms = [0.0 if pm <= 0 else math.radians(pm) / x for pm, x in zip(pms, wc, strict=True)]
        return {
            "crossovers_rad_s": wc,
            "crossover_rad_s": wc[i],
            "phase_margin_deg": pms[i],
            "delay_margin_s": min(dms),
            "gain_margin_db": gm,
            "phase_crossover_rad_s": wpc,
            "sensitivity_peak": ms,
            "complementary_peak": mt,
        }
    return {
        "crossovers_rad_s": [],
        "crossover_rad_s": None,
        "phase_margin_deg": None,
        "delay_margin_s": None,
        "gain_margin_db": gm,
        "phase_crossover_rad_s": wpc,
        "sensitivity_peak": ms,
        "complementary_peak": mt,
    }
