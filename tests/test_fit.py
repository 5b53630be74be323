"""The rational-with-delay fit (explorer/model/fit.py, docs/measured-data.md).

Reference: data sampled from known models (the truth is the model itself); the fit's
reported error is re-checked with scipy.signal.freqresp on the fitted zeros-poles-gain
(an evaluator we did not write). Method: vector fitting, Gustavsen & Semlyen, IEEE
Trans. Power Delivery 14(3), 1999; relaxed form, Gustavsen, IEEE TPWRD 21(3), 2006.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from explorer.core.loop import Rational
from explorer.frequency.metrics import frequency_metrics
from explorer.frequency.on_data import loop_metrics_on_data
from explorer.model.fit import POOR_FIT_REL_RMS, fit_model, vector_fit
from explorer.model.sweep import MeasuredResponse, read_sweep

W = np.logspace(-2, 2, 81)  # 20 points per decade

MODELS = {
    "three lags": (Rational(gain=2.0, poles=(-1, -2, -5)), 0),
    "lag with delay": (Rational(gain=1.0, poles=(-0.5,), delay_s=0.8), 0),
    "integrator and lag": (Rational(gain=3.0, poles=(0, -4)), 0),
    "mode, zero and delay": (Rational(gain=4.0, zeros=(-3,), poles=(-0.3 + 2j, -0.3 - 2j, -1),
                                      delay_s=0.1), 0),
    "unstable pole": (Rational(gain=1.0, poles=(1.0, -10)), 1),
}


def _match(got: tuple[complex, ...], want: tuple[complex, ...]) -> float:
    """Largest relative distance from each true root to its nearest fitted root."""
    assert len(got) == len(want), (got, want)
    g = np.array(got)
    return max((float(np.min(np.abs(g - r))) / max(abs(r), 1e-12) for r in want), default=0.0)


@pytest.mark.parametrize("name", list(MODELS))
def test_recovers_known_model_from_clean_data(name: str) -> None:
    truth, up = MODELS[name]
    fit = fit_model(MeasuredResponse.from_model(truth, W), unstable_poles=up)
    assert fit.order == len(truth.poles)
    assert _match(fit.model.poles, truth.poles) < 1e-6
    assert _match(fit.model.zeros, truth.zeros) < 1e-6
    assert fit.model.delay_s == pytest.approx(truth.delay_s, abs=1e-6)
    assert fit.model.gain == pytest.approx(truth.gain, rel=1e-6)
    assert fit.rel_rms < 1e-6 and not fit.poor and fit.time_from_fit
    assert fit.model.n_integrators == truth.n_integrators


def test_reported_error_matches_scipy_evaluation() -> None:
    """The fit's rel_rms recomputed with scipy.signal.freqresp (zpk) and exp(−jωτ)."""
    truth = Rational(gain=1.0, poles=(-0.5, -3.0), delay_s=0.4)
    rng = np.random.default_rng(7)
    f = truth.freqresp(W) * (1 + 0.02 * (rng.standard_normal(W.size)
                                         + 1j * rng.standard_normal(W.size)) / np.sqrt(2))
    data = MeasuredResponse(omega_rad_s=W, response=f, phase_rad=np.unwrap(np.angle(f)),
                            coherence=None, source="noisy")
    fit = fit_model(data, max_order=4)
    m = fit.model
    _, h = signal.freqresp(signal.ZerosPolesGain(np.array(m.zeros), np.array(m.poles), m.gain), W)
    h = h * np.exp(-1j * W * m.delay_s)
    rel = np.abs(h / f - 1)
    assert fit.rel_rms == pytest.approx(float(np.sqrt(np.mean(rel ** 2))), rel=1e-9)
    assert fit.rel_max == pytest.approx(float(np.max(rel)), rel=1e-9)


@pytest.mark.parametrize("noise", [0.005, 0.02])
def test_noisy_data_fit_stays_within_noise(noise: float) -> None:
    """1 σ complex relative noise (seeded): the fit's residual is at the noise level
    (not far above: a good model; not far below: no over-fitting), and the fitted
    model is closer to the truth than the data are."""
    truth, _ = MODELS["mode, zero and delay"]
    rng = np.random.default_rng(11)
    e = noise * (rng.standard_normal(W.size) + 1j * rng.standard_normal(W.size)) / np.sqrt(2)
    f = truth.freqresp(W) * (1 + e)
    data = MeasuredResponse(omega_rad_s=W, response=f, phase_rad=np.unwrap(np.angle(f)),
                            coherence=None, source="noisy")
    fit = fit_model(data)
    noise_rms = float(np.sqrt(np.mean(np.abs(e) ** 2)))
    assert 0.7 * noise_rms < fit.rel_rms < 1.3 * noise_rms
    model_err = np.abs(fit.model.freqresp(W) / truth.freqresp(W) - 1)
    assert float(np.sqrt(np.mean(model_err ** 2))) < noise_rms
    assert fit.model.delay_s == pytest.approx(truth.delay_s, abs=10 * noise)
    assert not fit.poor


def test_poor_fit_withholds_time_figures() -> None:
    truth, _ = MODELS["mode, zero and delay"]
    fit = fit_model(MeasuredResponse.from_model(truth, W), orders=(1,), delay_s=0.0)
    assert fit.rel_rms > POOR_FIT_REL_RMS
    assert fit.poor and not fit.time_from_fit
    d = fit.to_dict()
    assert d["time_from_fit"] is False and any("poor fit" in n for n in d["notes"])


def test_unstable_pole_not_fitted_unless_declared() -> None:
    """Stable poles are enforced (flipped) unless the plant is declared unstable: the
    flipped pole cannot reproduce the phase, so the fit is poor and says why."""
    truth, _ = MODELS["unstable pole"]
    fit = fit_model(MeasuredResponse.from_model(truth, W), unstable_poles=0)
    assert all(p.real <= 0 for p in fit.model.poles)
    assert fit.poor


def test_vector_fit_real_coefficients() -> None:
    """Conjugate symmetry: poles and residues come in exact conjugate pairs."""
    truth = Rational(gain=5.0, zeros=(-1,), poles=(-0.2 + 3j, -0.2 - 3j, -0.5 + 0.7j,
                                                  -0.5 - 0.7j))
    f = truth.freqresp(W)
    p, r, d = vector_fit(W, f, np.array([-0.01 + 0.1j, -0.01 - 0.1j, -0.1 + 10j, -0.1 - 10j]),
                         weight=1 / np.abs(f), iterations=15)
    assert d == 0.0
    for i, pi in enumerate(p):
        if pi.imag:
            j = int(np.argmin(np.abs(p - np.conj(pi))))
            assert p[j] == np.conj(pi) and r[j] == np.conj(r[i])
    assert _match(tuple(p), truth.poles) < 1e-8


# ----------------------------------------------------------------------------------
# the bundled, invented example (studies/data/make_gate_sweep.py)
# ----------------------------------------------------------------------------------
DATA_DIR = Path(__file__).resolve().parent.parent / "studies" / "data"


def _generator():
    spec = importlib.util.spec_from_file_location("make_gate_sweep",
                                                  DATA_DIR / "make_gate_sweep.py")
    assert spec and spec.loader
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_bundled_example_is_what_its_script_writes() -> None:
    gen = _generator()
    assert (DATA_DIR / "hopper_gate_sweep.csv").read_text() == gen.make()


def test_bundled_example_fit_and_metrics() -> None:
    """The fit recovers the invented model within the data's noise (about 1 %), and
    the metrics on the data agree with the true model's (explorer.frequency.metrics) within the
    interpolation bound plus 1 % (the bound covers interpolation, not measurement
    noise: docs/measured-data.md)."""
    gen = _generator()
    truth = gen.true_plant()
    data = read_sweep(DATA_DIR / "hopper_gate_sweep.csv")
    assert data.coherence is not None and len(data.low_coherence_rows()) > 0
    fit = fit_model(data)
    assert not fit.poor and fit.order == 4
    assert _match(fit.model.poles, truth.poles) < 0.02
    assert fit.model.zeros == ()
    assert fit.model.gain == pytest.approx(truth.gain, rel=0.02)
    assert fit.model.delay_s == pytest.approx(truth.delay_s, rel=0.1)
    comp = Rational(gain=2.0, zeros=(-2.0,), poles=(-12.0,))
    m = loop_metrics_on_data(data, comp)
    ref = frequency_metrics(truth, comp)
    assert m["closed_loop_stable"] is True and ref["closed_loop_stable"] is True
    for key in ("crossover_rad_s", "phase_margin_deg", "gain_margin_db", "sensitivity_peak",
                "complementary_peak"):
        tol = m["interpolation_error"][key] + 0.01 * abs(ref[key])
        assert abs(m[key] - ref[key]) <= tol, key
