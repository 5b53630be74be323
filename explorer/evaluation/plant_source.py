"""Where a design's figures come from: the plant model, or a measured sweep
(docs/measured-data.md, "Wiring").

A study's plant is either a model (a :class:`explorer.core.loop.Rational`) or a measured
frequency response (``[plant] data``) with a rational-plus-delay model fitted to it.
With data, frequency metrics are read on the data (:mod:`explorer.frequency.on_data`) and
time-domain metrics come from the fitted model only when the fit is good
(:mod:`explorer.model.fit`). Every caller that judges a design — ``check``, the hand
designs, the search's batches, the re-check of explored designs — asks this module,
so the rule lives in one place:

- :func:`frequency_batch`: frequency metrics of a batch (arrays, NaN = null), the
  shape of :func:`explorer.frequency.metrics.frequency_metrics_batch`;
- :func:`balance_plant`: the plant the search's structures are balanced on (the data's
  own magnitude and phase at ωc, so a searched crossover lands on the data exactly);
- :func:`hand_plant`: the fitted model adjusted to the data at the target crossover,
  for the hand designs;
- :func:`design_figures`: one design's METRICS, the record extras and the reasons a
  null value is not established.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from explorer.core.loop import Rational
from explorer.frequency.metrics import frequency_metrics, frequency_metrics_batch
from explorer.frequency.on_data import loop_metrics_on_data, loop_metrics_on_data_batch
from explorer.model.measured_plant import MeasuredPlant
from explorer.model.sweep import SweepInterpolant
from explorer.time_domain.timeresp import step_metrics

__all__ = [
    "frequency_batch",
    "balance_plant",
    "hand_plant",
    "design_figures",
    "LOWER_MARGINS",
    "DATA_EXTRAS",
]

#: Lower-bound margins whose null value needs the data's floor (docs/measured-data.md).
LOWER_MARGINS = ("phase_margin_deg", "gain_margin_db", "delay_margin_s")
#: Keys of a data result that go in the DESIGN record beside ``metrics``.
DATA_EXTRAS = ("band_rad_s", "interpolation_error", "outside_band", "assumptions",
               "low_coherence_points")
#: Frequency keys of a batch (as explorer.frequency.metrics.frequency_metrics_batch).
_BATCH_KEYS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db",
               "phase_crossover_rad_s", "delay_margin_s", "sensitivity_peak",
               "complementary_peak", "hf_gain", "integral_gain", "lower_gain_margin_db",
               "sensitivity_peak_rad_s", "complementary_peak_rad_s", "closed_loop_rhp_poles")


# --------------------------------------------------------------------------------------
# batches
# --------------------------------------------------------------------------------------
def frequency_batch(plant: Rational, measured: MeasuredPlant | None, gain: np.ndarray,
                    zeros: np.ndarray, poles: np.ndarray) -> dict[str, np.ndarray]:
    """Frequency metrics of a batch of one structure: on the model
    (:func:`explorer.frequency.metrics.frequency_metrics_batch`) or on the data. Arrays, NaN =
    null, ``crossovers_rad_s`` (n, k) padded with NaN. With data, also
    ``floor_<key>`` for the lower-bound margins: what a NaN value is known to be at
    least (+inf: infinite; -inf: not established)."""
    if measured is None:
        return frequency_metrics_batch(plant, gain, zeros, poles)

    g = np.asarray(gain, float).ravel()
    n = g.size
    res = loop_metrics_on_data_batch(
        measured.data, g, np.asarray(zeros, complex).reshape(n, -1),
        np.asarray(poles, complex).reshape(n, -1), unstable_poles=measured.unstable_poles,
        plant_integrators=measured.integrators)
    out: dict[str, np.ndarray] = {}
    for key in _BATCH_KEYS:
        out[key] = np.array([np.nan if r.get(key) is None else float(r[key]) for r in res])
    out["closed_loop_stable"] = np.array([r["closed_loop_stable"] is True for r in res])
    width = max([len(r["crossovers_rad_s"]) for r in res] + [1])
    xs = np.full((n, width), np.nan)
    for i, r in enumerate(res):
        xs[i, :len(r["crossovers_rad_s"])] = r["crossovers_rad_s"]
    out["crossovers_rad_s"] = xs
    for key in LOWER_MARGINS:
        out["floor_" + key] = np.array([r["margin_floors"][key] for r in res])
    return out


class _DataView(Rational):
    """The measured plant as :func:`explorer.design.structures.balance` reads it: magnitude
    and phase from the interpolant (exactly what the data metrics use), the gain sign
    and zeros of the fitted model (for :func:`explorer.core.loop.feedback_sign`)."""

    _interp: SweepInterpolant

    def freqresp(self, omega_rad_s: np.ndarray | float) -> np.ndarray:
        lm, ph = self._interp.eval(np.log(np.asarray(omega_rad_s, float)))
        return np.exp(lm + 1j * ph)

    def phase_rad(self, omega_rad_s: np.ndarray | float) -> np.ndarray:
        return self._interp.eval(np.log(np.asarray(omega_rad_s, float)))[1]


def balance_plant(plant: Rational, measured: MeasuredPlant | None) -> Rational:
    """The plant a structure is balanced on (magnitude and phase at ωc): the model,
    or the data's interpolant (so the crossover lands on the data, not on the fit)."""
    if measured is None:
        return plant
    view = _DataView(gain=plant.gain, zeros=plant.zeros, poles=plant.poles,
                     delay_s=plant.delay_s)
    object.__setattr__(view, "_interp", measured.interpolant())
    return view


def hand_plant(plant: Rational, measured: MeasuredPlant | None,
               wc_rad_s: float | None) -> tuple[Rational, str | None]:
    """The model the hand designs are placed on, and a step line saying how it was
    made: the plant itself (no line), or the fitted model made to agree with the data at
    the target crossover ``wc_rad_s`` — the gain scaled to the data's magnitude there,
    the phase difference taken up by the delay (or, when that would make the delay
    negative, by a real zero far above ωc). The hand procedures set the crossover and
    the phase margin from L(jωc) only, so on the data they then meet them as exactly as
    on a model; the rest of the design is read on the data afterwards."""
    if measured is None or wc_rad_s is None:
        return plant, None
    interp = measured.interpolant()
    lm, ph = interp.eval(np.array([math.log(wc_rad_s)]))
    p_ph = float(plant.phase_rad(np.array([wc_rad_s]))[0])
    d = float(ph[0]) - p_ph
    d -= 2.0 * math.pi * round(d / (2.0 * math.pi))  # the same phase on another branch
    zeros = plant.zeros
    delay = plant.delay_s - d / wc_rad_s
    how = f"delay {plant.delay_s:.4g} s -> {max(delay, 0.0):.4g} s"
    if delay < 0.0:
        # phase to add beyond the delay: a zero at −a gives atan(ωc/a)
        extra = -delay * wc_rad_s
        delay = 0.0
        if extra > 1e-12 and len(plant.poles) > len(plant.zeros):
            a = wc_rad_s / math.tan(min(extra, 1.4))
            zeros = (*zeros, complex(-a, 0.0))
            how += f", a zero at {-a:.4g} rad/s"
    adj = Rational(gain=plant.gain, zeros=zeros, poles=plant.poles, delay_s=delay)
    scale = math.exp(float(lm[0])) / float(np.abs(adj.freqresp(np.array([wc_rad_s])))[0])
    step = (f"measured plant: placed on the fitted model made to match the data at "
            f"{wc_rad_s:.4g} rad/s (phase {math.degrees(d):+.3g} deg: {how}; gain x{scale:.4g}); "
            "every figure in the table is read on the data")
    return Rational(gain=adj.gain * scale, zeros=adj.zeros, poles=adj.poles,
                    delay_s=delay), step


# --------------------------------------------------------------------------------------
# one design
# --------------------------------------------------------------------------------------
_TIME_KEYS = ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control", "iae_load",
              "final_value")


def design_figures(measured: MeasuredPlant, comp: Rational, limits: dict[str, float]
                   ) -> tuple[dict[str, Any], dict[str, Any], dict[str, str]]:
    """One design on a measured plant: (METRICS, record extras, unknown) where
    ``unknown`` maps a METRICS key whose null value is not established to the reason
    (read by :func:`explorer.evaluation.records.meets_targets`)."""

    model = measured.fit.model
    r = loop_metrics_on_data(measured.data, comp, unstable_poles=measured.unstable_poles,
                             plant_integrators=measured.integrators)
    floors = r.pop("margin_floors")
    extras = {k: r.pop(k) for k in DATA_EXTRAS}
    metrics: dict[str, Any] = dict(r)
    unknown = _unknown(metrics, floors, extras["outside_band"], limits)
    # docs/interface.md types closed_loop_stable as a boolean: not established is
    # reported as false, with the reason in outside_band (and in misses)
    stable = metrics.get("closed_loop_stable") is True
    metrics["closed_loop_stable"] = stable
    note: str | None = None
    tm: dict[str, Any] = {k: None for k in _TIME_KEYS}
    fit_ok = measured.fit.time_from_fit
    if not fit_ok:
        note = "time-domain figures withheld: " + "; ".join(
            n for n in measured.fit.notes if "withheld" in n)
    elif stable:
        fm = frequency_metrics(model, comp)
        if fm.get("closed_loop_stable"):
            tm = dict(step_metrics(model, comp, stable=True))
        else:
            fit_ok = False
            note = ("time-domain figures withheld: the loop with the fitted model is "
                    "unstable while the data's loop is stable (the fit is not close enough "
                    "at this design's crossover)")
    for k in _TIME_KEYS:
        v = tm.get(k)
        metrics[k] = None if v is None or not math.isfinite(float(v)) else float(v)
    extras["time_from_fit"] = bool(fit_ok)
    extras["time_note"] = note
    extras["fit"] = measured.fit.to_dict()
    for k in ("overshoot_pct", "settling_time_s", "rise_time_s", "peak_control", "iae_load"):
        if metrics[k] is None and not fit_ok and note:
            unknown.setdefault(k, note)
    return metrics, extras, unknown


def _unknown(metrics: dict[str, Any], floors: dict[str, float], outside: list[str],
             limits: dict[str, float]) -> dict[str, str]:
    """Null METRICS that the data do not establish, with the reason: stability, the
    crossover and its margins, the peaks, and a margin limit above the known floor."""
    out: dict[str, str] = {}
    cross = [o for o in outside if "crossover lies" in o]
    why = "; ".join(cross) or "outside the measured band"
    if metrics.get("closed_loop_stable") is None:
        for k in ("closed_loop_stable", "crossover_rad_s", "phase_margin_deg",
                  "delay_margin_s"):
            out[k] = why
    for k in ("sensitivity_peak", "complementary_peak"):
        if metrics.get(k) is None:
            text = next((o for o in outside if o.startswith(k + ": ")), why)
            text = text.removeprefix(k + ": ").removesuffix(": not established")
            out[k] = text.removesuffix(", not established")
    for k in LOWER_MARGINS:
        if metrics.get(k) is not None or k in out:
            continue
        floor = floors.get(k, -math.inf)
        bound = limits.get(k)
        if floor == math.inf:
            continue  # none exists: infinite
        if bound is not None and floor >= bound:
            continue  # the known floor already meets the limit
        out[k] = (f"at least {floor:.3g} (from the band's limits), not established"
                  if math.isfinite(floor) else why)
    return out
