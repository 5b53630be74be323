"""Where a design's figures come from: the plant model, or a measured sweep
(docs/measured-data.md, "Wiring").

A study's plant is either a model (a :class:`explorer.loop.Rational`) or a measured
frequency response (``[plant] data``) with a rational-plus-delay model fitted to it.
With data, frequency metrics are read on the data (:mod:`explorer.measured`) and
time-domain metrics come from the fitted model only when the fit is good
(:mod:`explorer.fit`). Every caller that judges a design — ``check``, the hand
designs, the search's batches, the re-check of explored designs — asks this module,
so the rule lives in one place:

- :func:`frequency_batch`: frequency metrics of a batch (arrays, NaN = null), the
  shape of :func:`explorer.metrics.frequency_metrics_batch`;
- :func:`balance_plant`: the plant the search's structures are balanced on (the data's
  own magnitude and phase at ωc, so a searched crossover lands on the data exactly);
- :func:`hand_plant`: the fitted model adjusted to the data at the target crossover,
  for the hand designs;
- :func:`design_figures`: one design's METRICS, the record extras and the reasons a
  null value is not established.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from explorer.fit import FitResult, fit_model
from explorer.loop import Rational
from explorer.measured import MeasuredResponse, _estimate_integrators, _interpolant, _Plant

__all__ = [
    "MeasuredPlant",
    "measured_plant",
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
#: Frequency keys of a batch (as explorer.metrics.frequency_metrics_batch).
_BATCH_KEYS = ("crossover_rad_s", "phase_margin_deg", "gain_margin_db",
               "phase_crossover_rad_s", "delay_margin_s", "sensitivity_peak",
               "complementary_peak", "hf_gain", "integral_gain", "lower_gain_margin_db",
               "sensitivity_peak_rad_s", "complementary_peak_rad_s", "closed_loop_rhp_poles")


@dataclass(frozen=True, kw_only=True, eq=False)
class MeasuredPlant:
    """A measured plant of a study: the sweep, the fit, and what the data cannot show
    (``unstable_poles``; ``integrators`` when given, else None = estimated)."""

    data: MeasuredResponse
    fit: FitResult
    unstable_poles: int
    integrators: int | None
    shown: str

    @property
    def plant_integrators(self) -> int:
        """The plant's integrators: given, else round(−slope) of the lowest points."""
        if self.integrators is not None:
            return self.integrators
        return _estimate_integrators(self.data)

    def interpolant(self) -> _Plant:
        return _interpolant(self.data, self.plant_integrators)

    def to_dict(self) -> dict[str, Any]:
        """The study echo's ``plant`` for a measured plant."""
        lo, hi = self.data.band_rad_s
        return {
            "data": self.shown,
            "points": int(self.data.omega_rad_s.size),
            "band_rad_s": [lo, hi],
            "unstable_poles": self.unstable_poles,
            "integrators": self.plant_integrators,
            "integrators_given": self.integrators is not None,
            "fit": self.fit.to_dict(),
        }


def measured_plant(data: MeasuredResponse, *, unstable_poles: int = 0,
                   integrators: int | None = None, shown: str | None = None) -> MeasuredPlant:
    """Fit the model and bundle it with the data. A fit whose integrators differ from
    the plant's (given or estimated) is marked poor: its step responses would be of
    another plant type."""
    fit = fit_model(data, unstable_poles=unstable_poles)
    n_int = integrators if integrators is not None else _estimate_integrators(data)
    if fit.model.n_integrators != n_int:
        from dataclasses import replace

        fit = replace(fit, poor=True, notes=(*fit.notes, (
            f"the fit has {fit.model.n_integrators} integrator(s), the plant "
            f"{n_int} ({'given' if integrators is not None else 'estimated'}): "
            "time-domain figures are withheld (null)")))
    return MeasuredPlant(data=data, fit=fit, unstable_poles=unstable_poles,
                         integrators=integrators, shown=shown or data.source)


# --------------------------------------------------------------------------------------
# batches
# --------------------------------------------------------------------------------------
def frequency_batch(plant: Rational, measured: MeasuredPlant | None, gain: np.ndarray,
                    zeros: np.ndarray, poles: np.ndarray) -> dict[str, np.ndarray]:
    """Frequency metrics of a batch of one structure: on the model
    (:func:`explorer.metrics.frequency_metrics_batch`) or on the data. Arrays, NaN =
    null, ``crossovers_rad_s`` (n, k) padded with NaN. With data, also
    ``floor_<key>`` for the lower-bound margins: what a NaN value is known to be at
    least (+inf: infinite; -inf: not established)."""
    if measured is None:
        from explorer.metrics import frequency_metrics_batch

        return frequency_metrics_batch(plant, gain, zeros, poles)
    from explorer.measured import loop_metrics_on_data_batch

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
    """The measured plant as :func:`explorer.structures.balance` reads it: magnitude
    and phase from the interpolant (exactly what the data metrics use), the gain sign
    and zeros of the fitted model (for :func:`explorer.loop.feedback_sign`)."""

    _interp: _Plant

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
    (read by :func:`explorer.evaluate.meets_targets`)."""
    from explorer.measured import loop_metrics_on_data
    from explorer.metrics import frequency_metrics
    from explorer.timeresp import step_metrics

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
