"""explorer.frequency.sampled: discretization, sections, the exact sampled plant and the
sampled-loop metrics, each against something we did not write (named beside the
check): scipy.signal (cont2discrete, sosfilt, dstep, zpk2ss), closed forms, the
Poisson-summation (aliasing) formula of the sampled frequency response, and plain
simulation of the difference equations."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, signal

from explorer.core.errors import DesignError
from explorer.core.loop import Rational
from explorer.frequency.metrics import frequency_metrics
from explorer.frequency.sampled import (
    closed_loop_matrix,
    closed_loop_roots_outside,
    compensator_stages,
    cont_loop_with,
    difference_equations,
    discretize,
    industrial_form,
    sample_plant,
    sampled_loop_metrics,
    stage_sections,
    tustin_constant,
)

# compensators of our own invention: PI + lead, lead + notch + roll-off (strictly
# proper), PID core with a complex zero pair, a lag with a differentiator-free wash
PI_LEAD = Rational(gain=150.9, zeros=(-1 / 3, -2.0), poles=(0.0, -6.0))
NOTCHED = Rational(gain=40.0, zeros=(-1.5, -0.6 + 6j, -0.6 - 6j),
                   poles=(-5.0, -4.5 + 4.5j, -4.5 - 4.5j, -30.0))
PID_PAIR = Rational(gain=3.0, zeros=(-0.5 + 0.4j, -0.5 - 0.4j), poles=(0.0, -8.0))
LAG_ROLL = Rational(gain=2.0, zeros=(-0.3,), poles=(-0.03, -12.0, -20.0))
COMPS = [PI_LEAD, NOTCHED, PID_PAIR, LAG_ROLL]

# plants of our own invention: three lags; integrator + lightly damped mode; an
# unstable pole; a lag with a transport delay
LAGS = Rational(gain=0.1333, poles=(-1 / 3, -2.0, -4.0))
MODE = Rational(gain=30.0, poles=(0.0, -2.0, -0.3 + 6j, -0.3 - 6j))
FALLING = Rational(gain=300.0, zeros=(-20.0,), poles=(3.0, -3.0, -40.0))
DUCT = Rational(gain=0.0004, poles=(-0.02, -0.1), delay_s=6.0)


def _tf(r: Rational) -> tuple[np.ndarray, np.ndarray]:
    num = r.gain * np.real(np.poly(np.array(r.zeros, complex)))
    den = np.real(np.poly(np.array(r.poles, complex)))
    return np.atleast_1d(num), np.atleast_1d(den)


def _scipy_bilinear(comp: Rational, T: float, wp: float | None) -> tuple[np.ndarray, np.ndarray]:
    """scipy's bilinear map with the step dt' = 2/c: s ← (2/dt')(z − 1)/(z + 1) is the
    prewarped substitution s ← c(z − 1)/(z + 1) (scipy.signal.cont2discrete)."""
    c = 2.0 / T if wp is None else wp / math.tan(wp * T / 2)
    num, den = _tf(comp)
    numd, dend, _ = signal.cont2discrete((num, den), 2.0 / c, method="bilinear")
    numd = np.atleast_1d(np.squeeze(numd))
    return numd / dend[0], dend / dend[0]


# -- discretization ----------------------------------------------------------------------
@pytest.mark.parametrize("comp", COMPS)
@pytest.mark.parametrize("T, wp", [(0.05, 1.5), (0.2, 3.0), (0.01, None)])
def test_tustin_matches_scipy_bilinear(comp: Rational, T: float, wp: float | None) -> None:
    """C(z) coefficients equal scipy.signal.cont2discrete(method="bilinear") applied
    with dt' = 2/c (c = ωp/tan(ωpT/2), or 2/T without prewarping)."""
    d = discretize(comp, T, "tustin-prewarp" if wp else "tustin", wp)
    b, a = d.coefficients()
    nb, na = _scipy_bilinear(comp, T, wp)
    np.testing.assert_allclose(a, na, rtol=1e-9, atol=1e-11)
    np.testing.assert_allclose(b, nb, rtol=1e-8, atol=1e-10 * np.max(np.abs(nb)))


@pytest.mark.parametrize("comp", COMPS)
def test_tustin_closed_form_and_prewarp_point(comp: Rational) -> None:
    """C(e^{jωT}) = C(s) at s = (ωp/tan(ωpT/2))·(z − 1)/(z + 1) (the defining
    substitution, docs/interface.md) at many frequencies, and hence C(z) = C(jωp) exactly
    at ω = ωp (the purpose of prewarping)."""
    T, wp = 0.1, 2.5
    d = discretize(comp, T, "tustin-prewarp", wp)
    w = np.linspace(0.01, 0.999 * math.pi / T, 500)
    z = np.exp(1j * w * T)
    c = wp / math.tan(wp * T / 2)
    s = c * (z - 1) / (z + 1)
    num, den = _tf(comp)
    expect = np.polyval(num, s) / np.polyval(den, s)
    np.testing.assert_allclose(d.freqresp(w), expect, rtol=1e-9)
    np.testing.assert_allclose(d.freqresp(np.array([wp])), comp.freqresp(np.array([wp])),
                               rtol=1e-10)


def test_prewarp_at_or_above_nyquist_refused() -> None:
    """ωp ≥ π/T has no prewarped map (tan(ωpT/2) ≤ 0 or infinite)."""
    with pytest.raises(DesignError, match="π/T"):
        tustin_constant(0.5, math.pi / 0.5)
    with pytest.raises(DesignError, match="improper"):
        discretize(Rational(gain=1.0, zeros=(-1.0, -2.0), poles=(-3.0,)), 0.1, "tustin")


def test_matched_closed_form_first_order_lag() -> None:
    """Matched pole-zero mapping of a/(s + a): pole e^{−aT}, the zero at infinity to
    z = −1, DC gain 1: C(z) = (1 − e^{−aT})(z + 1)/(2(z − e^{−aT})) (closed form of the
    mapping rules; Franklin, Powell & Workman, Digital Control of Dynamic Systems,
    3rd ed., §6.3 — from memory)."""
    a, T = 3.0, 0.2
    d = discretize(Rational(gain=a, poles=(-a,)), T, "matched")
    q = math.exp(-a * T)
    assert d.poles == pytest.approx((q,))
    assert d.zeros == pytest.approx((-1.0,))
    assert d.gain == pytest.approx((1 - q) / 2, rel=1e-12)


def test_matched_keeps_low_frequency_asymptote() -> None:
    """For a PI + lead, |C(z)|/|C(jω)| → 1 as ω → 0 (integral gain kept, closed form:
    an integrator 1/s ↔ T/(z − 1) near z = 1), roots mapped by z = e^{rT}."""
    T = 0.05
    d = discretize(PI_LEAD, T, "matched")
    mapped = np.exp(np.array(PI_LEAD.poles) * T)
    assert sorted(np.abs(d.poles)) == pytest.approx(sorted(np.abs(mapped)))
    w = np.array([1e-6, 1e-5])
    ratio = d.freqresp(w) / PI_LEAD.freqresp(w)
    np.testing.assert_allclose(ratio, 1.0, rtol=1e-4)


# -- stages and sections ---------------------------------------------------------------------
@pytest.mark.parametrize("comp", COMPS)
@pytest.mark.parametrize("method", ["tustin-prewarp", "matched"])
def test_sections_step_equals_dstep_of_transfer_function(comp: Rational, method: str) -> None:
    """Running the sections (scipy.signal.sosfilt) reproduces the step response of
    C(z) in transfer-function form (scipy.signal.dstep); for Tustin the tf is scipy's
    own bilinear map, for matched it is np.poly of the mapped roots."""
    T, wp = 0.05, 1.5
    stages = compensator_stages(comp, T, method, wp if method == "tustin-prewarp" else None)
    sos = stage_sections(stages)
    assert np.all(sos[:, 3] == 1.0)
    n = 300
    y_sos = signal.sosfilt(sos, np.ones(n))
    if method == "tustin-prewarp":
        nb, na = _scipy_bilinear(comp, T, wp)
    else:
        nb, na = discretize(comp, T, method).coefficients()
    _, (y_tf,) = signal.dstep((nb, na, T), n=n)
    scale = np.max(np.abs(y_tf))
    np.testing.assert_allclose(y_sos, y_tf[:, 0], atol=1e-8 * scale, rtol=1e-8)


def test_stage_names() -> None:
    """Stage kinds follow the roots (closed form: a zero below its pole is a lead)."""
    kinds = [s.kind for s in compensator_stages(PI_LEAD, 0.05, "tustin-prewarp", 1.0)]
    assert kinds == ["pi", "lead"]
    kinds = [s.kind for s in compensator_stages(NOTCHED, 0.01, "tustin-prewarp", 1.5)]
    assert sorted(kinds) == ["lead", "notch", "roll-off"]
    kinds = [s.kind for s in compensator_stages(LAG_ROLL, 0.01, "tustin", None)]
    assert sorted(kinds) == ["lag", "roll-off", "roll-off"]
    kinds = [s.kind for s in compensator_stages(PID_PAIR, 0.01, "tustin", None)]
    assert kinds == ["pid"]


def test_difference_equation_text_runs() -> None:
    """The printed difference equations, evaluated as written, give the sosfilt
    response (scipy.signal.sosfilt)."""
    stages = compensator_stages(PI_LEAD, 0.05, "tustin-prewarp", 0.8)
    lines = difference_equations(stages, digits=17)
    n = 50
    sig = {"e": np.ones(n)}
    for line in lines:
        lhs, rhs = line.split(" = ")
        name = lhs.split("[")[0]
        out = np.zeros(n)
        for k in range(n):
            env = {}
            for key, arr in {**sig, name: out}.items():
                for j in range(3):
                    env[f"{key}_{j}"] = arr[k - j] if k - j >= 0 else 0.0
            expr = rhs
            for key in {**sig, name: out}:
                for j in (2, 1):
                    expr = expr.replace(f"{key}[k-{j}]", f"{key}_{j}")
                expr = expr.replace(f"{key}[k]", f"{key}_0")
            out[k] = eval(expr, {}, env)  # noqa: S307 - our own printed arithmetic
        sig[name] = out
    ref = signal.sosfilt(stage_sections(stages), np.ones(n))
    np.testing.assert_allclose(sig["u"], ref, rtol=1e-12, atol=1e-9)


@pytest.mark.parametrize(
    "comp, structure",
    [
        (Rational(gain=2.0, zeros=(-0.5,), poles=(0.0,)), "PI"),
        (Rational(gain=4.0, zeros=(-1.0,), poles=(-8.0,)), "PD with derivative filter"),
        (PI_LEAD, "PID with derivative filter"),
        (PID_PAIR, "PID with derivative filter"),
    ],
)
def test_industrial_form_reproduces_compensator(comp: Rational, structure: str) -> None:
    """The standard (ISA) form Kp(1 + 1/(Ti s) + Td s/(1 + Td s/N)) and the parallel
    form kp + ki/s + kd s/(Tf s + 1) (common practice definitions), evaluated at many
    frequencies, equal C(jω)."""
    f = industrial_form(comp)
    assert f is not None and f["structure"] == structure
    w = np.logspace(-3, 3, 200)
    s = 1j * w
    st, pa = f["standard"], f["parallel"]
    std = st["Kp"] * (1 + (1 / (st["Ti_s"] * s) if "Ti_s" in st else 0)
                      + (st["Td_s"] * s / (1 + st["Td_s"] * s / st["N"]) if "Td_s" in st else 0))
    par = pa["kp"] + pa.get("ki_per_s", 0) / s
    if "kd_s" in pa:
        par = par + pa["kd_s"] * s / (pa["Tf_s"] * s + 1)
    ref = comp.freqresp(w)
    np.testing.assert_allclose(std, ref, rtol=1e-10)
    np.testing.assert_allclose(par, ref, rtol=1e-10)


def test_industrial_form_none_for_lag() -> None:
    """An integrator with a lag (zero above the pole) would need kd < 0: no PID form."""
    assert industrial_form(Rational(gain=1.0, zeros=(-4.0, -5.0), poles=(0.0, -1.0))) is None
    assert industrial_form(NOTCHED) is None


# -- the sampled plant ------------------------------------------------------------------------
def _scipy_zoh_freqresp(plant: Rational, T: float, d: int, w: np.ndarray) -> np.ndarray:
    """H(e^{jωT}) from scipy.signal.zpk2ss + cont2discrete(method="zoh"), times z^-d."""
    A, B, C, D = signal.zpk2ss(np.array(plant.zeros), np.array(plant.poles), plant.gain)
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    z = np.exp(1j * w * T)
    n = Ad.shape[0]
    out = np.array([(Cd @ np.linalg.solve(zz * np.eye(n) - Ad, Bd))[0, 0] + Dd[0, 0] for zz in z])
    return out * z ** (-d)


@pytest.mark.parametrize("plant", [LAGS, MODE, FALLING])
@pytest.mark.parametrize("delay_samples", [0, 3])
def test_sampled_plant_integer_delay_vs_scipy_zoh(plant: Rational, delay_samples: int) -> None:
    """Integer-sample delays: equals scipy's ZOH discretization times z^-d."""
    T = 0.05
    sp = sample_plant(plant, T, extra_delay_s=delay_samples * T)
    assert sp.d == delay_samples and sp.eps_s == 0.0
    w = np.linspace(0.02, 0.999 * math.pi / T, 300)
    np.testing.assert_allclose(sp.freqresp(w), _scipy_zoh_freqresp(plant, T, delay_samples, w),
                               rtol=1e-8)


def test_fractional_delay_first_order_closed_form() -> None:
    """e^{−sτ}·b/(s + a) with ZOH, τ = dT + ε: H(z) = b(β0 z + β1)/(z^{d+1}(z − e^{−aT})),
    β0 = (1 − e^{−a(T−ε)})/a, β1 = e^{−a(T−ε)}(1 − e^{−aε})/a (Åström & Wittenmark,
    Computer-Controlled Systems, 3rd ed., §2.3, first-order system with time delay)."""
    a, b, T = 0.7, 2.0, 0.4
    for tau in (0.1, 0.55, 1.3):
        d, eps = int(tau // T), tau - T * int(tau // T)
        sp = sample_plant(Rational(gain=b, poles=(-a,), delay_s=tau), T)
        w = np.linspace(0.01, 0.999 * math.pi / T, 200)
        z = np.exp(1j * w * T)
        b0 = (1 - math.exp(-a * (T - eps))) / a
        b1 = math.exp(-a * (T - eps)) * (1 - math.exp(-a * eps)) / a
        expect = b * (b0 * z + b1) / (z ** (d + 1) * (z - math.exp(-a * T)))
        np.testing.assert_allclose(sp.freqresp(w), expect, rtol=1e-10)


@pytest.mark.parametrize("plant", [Rational(gain=5.0, poles=(-1.0, -3.0)), MODE, FALLING])
def test_sampled_plant_vs_aliasing_sum(plant: Rational) -> None:
    """Any delay, fractional included: H(e^{jωT}) = (1 − e^{−jωT})/T ·
    Σ_k P(jω_k) e^{−jω_kτ}/(jω_k), ω_k = ω + 2πk/T (Poisson summation: the spectrum
    of the sampled pulse response is the sum of the shifted continuous spectra; e.g.
    Åström & Wittenmark, Computer-Controlled Systems, 3rd ed., ch. 7 — from memory).
    Truncated at |k| ≤ K, relative degree 2 or more: error O(1/K²)."""
    T, tau = 0.1, 0.237
    sp = sample_plant(plant, T, extra_delay_s=tau)
    w = np.array([0.3, 1.1, 4.0, 9.0, 25.0, 0.97 * math.pi / T])
    K = 20000
    k = np.arange(-K, K + 1)
    wk = w[:, None] + 2 * math.pi * k[None, :] / T
    P = plant.freqresp(wk.ravel()).reshape(wk.shape)
    total = np.sum(P * np.exp(-1j * wk * tau) / (1j * wk), axis=1)
    expect = (1 - np.exp(-1j * w * T)) / T * total
    np.testing.assert_allclose(sp.freqresp(w), expect, rtol=1e-6)


def test_sampled_freqresp_batch_equals_one_by_one() -> None:
    """The vectorised evaluation equals evaluation one frequency at a time."""
    sp = sample_plant(MODE, 0.05, 0.013)
    w = np.linspace(0.1, 60.0, 40)
    one = np.array([sp.freqresp(np.array([x]))[0] for x in w])
    np.testing.assert_allclose(sp.freqresp(w), one, rtol=1e-13)


# -- the sampled loop --------------------------------------------------------------------------
def _independent_loop(plant: Rational, comp: Rational, T: float, d: int, wp: float):
    nb, na = _scipy_bilinear(comp, T, wp)

    def L(w: np.ndarray) -> np.ndarray:
        w = np.atleast_1d(w)
        z = np.exp(1j * w * T)
        cz = np.polyval(nb, z) / np.polyval(na, z)  # same degree: ratio in z equals z^-1 form
        return cz * _scipy_zoh_freqresp(plant, T, d, w)

    return L


def test_sampled_margins_vs_independent_evaluation() -> None:
    """Duct plant (6 s delay) sampled at T = 1.5 s (4 samples): crossover, phase margin,
    gain margin and Ms from scipy's ZOH + bilinear tf, refined by scipy.optimize
    (brentq, minimize_scalar), agree with the engine's."""
    plant, T = DUCT, 1.5
    comp = Rational(gain=35.0, zeros=(-0.02, -0.1), poles=(0.0, -0.25))
    wc = frequency_metrics(plant, comp)["crossover_rad_s"]
    sp = sample_plant(plant, T)
    assert sp.d == 4 and sp.eps_s == 0.0
    d = discretize(comp, T, "tustin-prewarp", wc)
    m = sampled_loop_metrics(sp, d, cont_loop_with(plant, comp, 0.0))
    rational_part = Rational(gain=plant.gain, zeros=plant.zeros, poles=plant.poles)
    L = _independent_loop(rational_part, comp, T, 4, wc)
    wn = math.pi / T
    grid = np.linspace(1e-4, wn * 0.9999, 20000)
    Lg = L(grid)
    i = int(np.flatnonzero(np.diff(np.sign(np.abs(Lg) - 1)))[0])
    w_x = optimize.brentq(lambda x: abs(L(x)[0]) - 1, grid[i], grid[i + 1], xtol=1e-14)
    assert m["crossover_rad_s"] == pytest.approx(w_x, rel=1e-9)
    pm = 180 + math.degrees(np.angle(L(w_x)[0]))
    assert m["phase_margin_deg"] == pytest.approx(pm, abs=1e-6)
    # first phase crossover: Im L changes sign with Re L < 0
    j = [k for k in np.flatnonzero(np.diff(np.sign(Lg.imag))) if Lg.real[k] < 0][0]
    w_p = optimize.brentq(lambda x: L(x)[0].imag, grid[j], grid[j + 1], xtol=1e-14)
    assert m["phase_crossover_rad_s"] == pytest.approx(w_p, rel=1e-8)
    assert m["gain_margin_db"] == pytest.approx(-20 * math.log10(abs(L(w_p)[0])), abs=1e-7)
    k = int(np.argmax(1 / np.abs(1 + Lg)))
    res = optimize.minimize_scalar(lambda x: -1 / abs(1 + L(x)[0]),
                                   bounds=(grid[k - 1], grid[k + 1]), method="bounded",
                                   options={"xatol": 1e-12})
    assert m["sensitivity_peak"] == pytest.approx(-res.fun, rel=1e-7)


def test_sampled_margins_tend_to_continuous() -> None:
    """As T → 0 the sampled crossover, phase and gain margins and Ms tend to the
    continuous ones (the hold's lag ωT/2 → 0); at T = 1e-4·(1/ωc) within the
    stated tolerances (0.05°, 0.05 dB, 1e-3 relative)."""
    plant, comp = LAGS, PI_LEAD
    c = frequency_metrics(plant, comp)
    wc = c["crossover_rad_s"]
    T = 1e-4 / wc
    s = sampled_loop_metrics(sample_plant(plant, T), discretize(comp, T, "tustin-prewarp", wc),
                             cont_loop_with(plant, comp, 0.0))
    assert s["crossover_rad_s"] == pytest.approx(wc, rel=1e-3)
    assert s["phase_margin_deg"] == pytest.approx(c["phase_margin_deg"], abs=0.05)
    assert s["gain_margin_db"] == pytest.approx(c["gain_margin_db"], abs=0.05)
    assert s["sensitivity_peak"] == pytest.approx(c["sensitivity_peak"], rel=1e-3)


@pytest.mark.parametrize("wcT", [0.01, 0.03, 0.06])
@pytest.mark.parametrize("plant, comp", [(LAGS, PI_LEAD), (MODE, NOTCHED)])
def test_phase_loss_follows_half_sample_rule(wcT: float, plant: Rational, comp: Rational) -> None:
    """For small ωc·T the phase margin lost to sampling is ωc·T/2 (the hold's average
    half-sample delay; common practice rule of thumb), within 5 % of the rule."""
    c = frequency_metrics(plant, comp)
    wc = c["crossover_rad_s"]
    T = wcT / wc
    s = sampled_loop_metrics(sample_plant(plant, T), discretize(comp, T, "tustin-prewarp", wc),
                             cont_loop_with(plant, comp, 0.0))
    rule = math.degrees(wcT / 2)
    assert c["phase_margin_deg"] - s["phase_margin_deg"] == pytest.approx(rule, rel=0.05)


def test_compute_delay_costs_its_phase() -> None:
    """A computation delay of two samples adds e^{−2jωT} exactly (closed form: an
    input delay of whole samples is z^-2): phase margin lower by 2·ωc·T (same
    crossover)."""
    plant, comp, T = LAGS, PI_LEAD, 0.02
    wc = frequency_metrics(plant, comp)["crossover_rad_s"]
    d = discretize(comp, T, "tustin-prewarp", wc)
    loop0 = cont_loop_with(plant, comp, 0.0)
    a = sampled_loop_metrics(sample_plant(plant, T), d, loop0)
    b = sampled_loop_metrics(sample_plant(plant, T, 2 * T), d, cont_loop_with(plant, comp, 2 * T))
    assert b["crossover_rad_s"] == pytest.approx(a["crossover_rad_s"], rel=1e-10)
    loss = math.degrees(2 * a["crossover_rad_s"] * T)
    assert a["phase_margin_deg"] - b["phase_margin_deg"] == pytest.approx(loss, abs=1e-7)


def test_closed_loop_eigenvalues_are_characteristic_roots() -> None:
    """The closed-loop matrix's eigenvalues are the roots of den_C·den_H + num_C·num_H
    (numpy polynomial arithmetic on scipy's ZOH and bilinear transfer functions;
    integer delay z^-d as d extra roots at 0)."""
    plant, comp, T, dly = FALLING, Rational(gain=2.0, zeros=(-1.0, -3.0), poles=(0.0, -60.0)), \
        0.004, 2
    sp = sample_plant(plant, T, dly * T)
    dc = discretize(comp, T, "tustin")
    ev = np.sort(np.abs(np.linalg.eigvals(closed_loop_matrix(sp, dc))))
    A, B, C, D = signal.zpk2ss(np.array(plant.zeros), np.array(plant.poles), plant.gain)
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    nh, dh = signal.ss2tf(Ad, Bd, Cd, Dd)
    nh = np.atleast_1d(np.squeeze(nh))
    dh = np.polymul(dh, np.r_[1.0, np.zeros(dly)])
    nc, dcp = _scipy_bilinear(comp, T, None)
    char = np.polyadd(np.polymul(dcp, dh), np.polymul(nc, nh))
    roots = np.sort(np.abs(np.roots(char)))
    # the matrix has one extra state (u[k−d−1]) at z = 0 for the fractional part
    assert ev[-len(roots):] == pytest.approx(roots, abs=1e-6)


def _simulate(plant: Rational, comp: Rational, T: float, n: int) -> np.ndarray:
    """Unit setpoint step through the sampled loop, written as plain difference
    equations: scipy's ZOH plant (integer delay), scipy's bilinear controller tf."""
    A, B, C, D = signal.zpk2ss(np.array(plant.zeros), np.array(plant.poles), plant.gain)
    Ad, Bd, Cd, _, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    d = int(round(plant.delay_s / T))
    nb, na = _scipy_bilinear(comp, T, None)
    x = np.zeros(Ad.shape[0])
    e_hist = np.zeros(nb.size)
    u_hist = np.zeros(na.size)
    u_past = [0.0] * (d + 1)
    y = np.zeros(n)
    for k in range(n):
        y[k] = (Cd @ x)[0]
        e_hist = np.r_[1.0 - y[k], e_hist[:-1]]
        u = (nb @ e_hist - na[1:] @ u_hist[:-1]) / na[0]
        u_hist = np.r_[u, u_hist[:-1]]
        u_past = [u, *u_past[:-1]]
        x = Ad @ x + Bd[:, 0] * u_past[d]
    return y


@pytest.mark.parametrize("T", [2.5, 3.5])
def test_stability_agrees_with_simulation(T: float) -> None:
    """Three-lag plant with a PI, plain Tustin: the engine's verdict for a stable
    (2.5 s) and an unstable (3.5 s) sample time agrees with simulating the
    difference equations (bounded and settling to 1, or growing)."""
    comp = Rational(gain=53.8, zeros=(-1 / 3,), poles=(0.0,))
    m = sampled_loop_metrics(sample_plant(LAGS, T), discretize(comp, T, "tustin"),
                             cont_loop_with(LAGS, comp, 0.0))
    y = _simulate(LAGS, comp, T, 1500)
    if m["closed_loop_stable"]:
        assert abs(y[-1] - 1.0) < 1e-6
    else:
        assert np.max(np.abs(y[-100:])) > 1e3
    assert m["closed_loop_stable"] is (T == 2.5)


def _verdicts(plant: Rational, comp: Rational, T: float, extra_s: float) -> tuple[int, int]:
    from explorer.frequency.sampled import _grid

    sp = sample_plant(plant, T, extra_s)
    dc = discretize(comp, T, "tustin")
    ev = np.abs(np.linalg.eigvals(closed_loop_matrix(sp, dc)))
    grid = _grid(sp, dc, cont_loop_with(plant, comp, extra_s), [])
    return int(np.sum(ev >= 1 - 1e-9)), closed_loop_roots_outside(sp, dc, grid)


def test_argument_principle_agrees_with_eigenvalues() -> None:
    """The two stability counts (argument principle on the unit circle, used for long
    delays; eigenvalues of the closed-loop matrix, checked above against the
    characteristic polynomial's roots) agree — stable and unstable loops, integer
    and fractional delays, an integrating, an unstable and a delayed plant."""
    duct_pi = Rational(gain=35.0, zeros=(-0.02, -0.1), poles=(0.0, -0.25))
    fall_pid = Rational(gain=2.0, zeros=(-1.0, -3.0), poles=(0.0, -60.0))
    mode_lead = Rational(gain=0.5, zeros=(-1.5,), poles=(-5.0,))
    seen = set()
    for plant, comp, T in ((DUCT, duct_pi, 0.5), (FALLING, fall_pid, 0.004),
                           (MODE, mode_lead, 0.05)):
        for factor in (0.3, 1.0, 3.0, 10.0):
            for extra in (0.0, 0.37 * T, 3 * T):
                c = Rational(gain=comp.gain * factor, zeros=comp.zeros, poles=comp.poles)
                if extra == 0.0 and plant.delay_s == 0.0:
                    continue  # the argument principle needs one pure delay sample
                n_eig, n_arg = _verdicts(plant, c, T, extra)
                assert n_eig == n_arg, (plant, factor, extra)
                seen.add(n_eig > 0)
    assert seen == {True, False}


@pytest.mark.parametrize("factor", [1.0, 5.0])
def test_long_delay_stability_vs_simulation(factor: float) -> None:
    """Duct plant, 6 s delay sampled at 0.02 s (300 samples, judged by the argument
    principle): the verdict agrees with simulating the difference equations."""
    comp = Rational(gain=35.0 * factor, zeros=(-0.02, -0.1), poles=(0.0, -0.25))
    T = 0.02
    m = sampled_loop_metrics(sample_plant(DUCT, T), discretize(comp, T, "tustin"),
                             cont_loop_with(DUCT, comp, 0.0))
    assert m["stability_method"] == "argument principle"
    y = _simulate(DUCT, comp, T, 40000)
    if m["closed_loop_stable"]:
        assert abs(y[-1] - 1.0) < 1e-3 and np.max(np.abs(y)) < 10
    else:
        assert np.max(np.abs(y[-1000:])) > 1e3
    assert m["closed_loop_stable"] is (factor == 1.0)
