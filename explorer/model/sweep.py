"""A measured frequency response as the plant: reading a sweep CSV and interpolating
it (docs/measured-data.md). Loop metrics on the data: :mod:`explorer.frequency.on_data`.

The plant is known only at the measured frequencies. Between them it is interpolated
in log frequency: ln|P| and the continuous phase ∠P (rad), each a PCHIP
(piecewise cubic Hermite, shape preserving: Fritsch & Carlson, SIAM J. Numer. Anal.
17(2), 1980; ``scipy.interpolate.PchipInterpolator``) in x = ln ω. A not-a-knot
cubic spline through the same points (``scipy.interpolate.CubicSpline``) is a
higher-order interpolant; the largest difference of the two over each measured
interval is the *interpolation error estimate* of that interval, and every reported
metric carries a bound derived from it (see
:func:`explorer.frequency.on_data.loop_metrics_on_data`).

The compensator C is analytic (an :class:`explorer.core.loop.Rational` or a batch of them):
it is evaluated exactly, so L = C·P̂ is only as uncertain as P̂.
"""

from __future__ import annotations

import csv
import io
import math
import os
import weakref
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import CubicSpline, PchipInterpolator

from explorer.core.errors import StudyFileError
from explorer.core.loop import Rational
from explorer.model.text_file import read_text_file

__all__ = [
    "MeasuredResponse",
    "SweepInterpolant",
    "read_sweep",
    "parse_sweep",
    "interpolant",
    "estimate_integrators",
    "MIN_POINTS",
    "LOW_COHERENCE",
    "ERROR_FACTOR",
]

#: Fewest measured points accepted.
MIN_POINTS = 8
#: Coherence below this is flagged (common practice: 0.6 is a usual floor for a
#: usable sine-sweep point).
LOW_COHERENCE = 0.6
#: The interpolation error estimate is this multiple of the PCHIP − spline difference
#: (a safety factor: the difference approaches PCHIP's own error as the data get
#: denser; 3 is what kept every metric of the test models inside its bound, the
#: tightest being a mode with damping 0.15 sampled at 10 points per decade, where
#: the error reached 2.1 times the plain difference — tests/test_measured.py).
ERROR_FACTOR = 3.0

_FREQ_COLS = {"frequency_rad_s": 1.0, "frequency_hz": 2.0 * math.pi}
_MAG_COLS = ("magnitude", "magnitude_db")
_KNOWN = set(_FREQ_COLS) | set(_MAG_COLS) | {"phase_deg", "coherence"}


@dataclass(frozen=True, kw_only=True, eq=False)
class MeasuredResponse:
    """A validated sweep: ``omega_rad_s`` strictly increasing (m,), ``response`` the
    complex P(jω) (m,), ``phase_rad`` the phase as measured (continuous, its branch
    kept: ``response`` alone would lose it), ``coherence`` (m,) or None, ``source``
    the file as named by the caller."""

    omega_rad_s: np.ndarray
    response: np.ndarray
    phase_rad: np.ndarray
    coherence: np.ndarray | None
    source: str

    @property
    def band_rad_s(self) -> tuple[float, float]:
        return float(self.omega_rad_s[0]), float(self.omega_rad_s[-1])

    def low_coherence_rows(self) -> list[int]:
        """Indices (0-based, in measured order) of points with coherence < LOW_COHERENCE."""
        if self.coherence is None:
            return []
        return [int(i) for i in np.flatnonzero(self.coherence < LOW_COHERENCE)]

    @classmethod
    def from_model(
        cls, model: Rational, omega_rad_s: np.ndarray, source: str = "model"
    ) -> MeasuredResponse:
        """Samples of a known model (continuous phase on loop.py's branch): for tests
        and the example generator."""
        w = np.asarray(omega_rad_s, dtype=float)
        return cls(
            omega_rad_s=w,
            response=model.freqresp(w),
            phase_rad=model.phase_rad(w),
            coherence=None,
            source=source,
        )


# --------------------------------------------------------------------------------------
# reading and validation
# --------------------------------------------------------------------------------------
def read_sweep(path: str | os.PathLike[str], *, key: str = "plant.data",
               shown: str | None = None) -> MeasuredResponse:
    """Read and validate a sweep CSV (docs/measured-data.md, "The file").

    ``key`` is the study key the errors are filed under; ``shown`` the name used in
    messages (default: the path as given). Every refusal is one
    :class:`StudyFileError` line naming the file and the row (the file's line number,
    the header being the first non-comment line)."""
    name = shown if shown is not None else os.fspath(path)
    try:
        text = read_text_file(path, "measured data file")
    except StudyFileError as exc:
        raise StudyFileError(key, exc.message.replace(os.fspath(path), name, 1)) from None
    return parse_sweep(text, source=name, key=key)


def parse_sweep(text: str, *, source: str, key: str = "plant.data") -> MeasuredResponse:
    """Validate the text of a sweep CSV; see :func:`read_sweep`."""

    def fail(row: int | None, msg: str) -> StudyFileError:
        where = f"{source} row {row}" if row is not None else source
        return StudyFileError(key, f"{where}: {msg}")

    lines = text.splitlines()
    rows: list[tuple[int, list[str]]] = []
    for lineno, line in enumerate(lines, start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        try:
            cells = next(csv.reader(io.StringIO(line)))
        except (csv.Error, StopIteration):
            raise fail(lineno, "not a CSV row") from None
        rows.append((lineno, [c.strip() for c in cells]))
    if not rows:
        raise fail(None, "no header row (expected e.g. frequency_hz,magnitude_db,phase_deg)")
    head_row, header = rows[0]
    seen: set[str] = set()
    for name in header:
        if name == "":
            raise fail(head_row, "an empty column name in the header")
        if name not in _KNOWN:
            raise fail(head_row, f"unknown column {name[:40]!r}; columns are frequency_rad_s or "
                                 "frequency_hz, magnitude or magnitude_db, phase_deg, "
                                 "optionally coherence")
        if name in seen:
            raise fail(head_row, f"column {name!r} appears twice")
        seen.add(name)
    freq = [c for c in header if c in _FREQ_COLS]
    mags = [c for c in header if c in _MAG_COLS]
    if len(freq) > 1:
        raise fail(head_row, "both frequency_rad_s and frequency_hz: give one frequency column")
    if len(mags) > 1:
        raise fail(head_row, "both magnitude and magnitude_db: give one magnitude column")
    if not freq:
        raise fail(head_row, "missing column frequency_rad_s or frequency_hz")
    if not mags:
        raise fail(head_row, "missing column magnitude or magnitude_db")
    if "phase_deg" not in seen:
        raise fail(head_row, "missing column phase_deg")
    col = {name: i for i, name in enumerate(header)}
    body = rows[1:]
    if len(body) < MIN_POINTS:
        raise fail(head_row, f"{len(body)} data rows: at least {MIN_POINTS} are needed")

    n = len(body)
    values = {name: np.empty(n) for name in header}
    for i, (lineno, cells) in enumerate(body):
        if len(cells) != len(header):
            raise fail(lineno, f"{len(cells)} cells, the header has {len(header)}")
        for name, j in col.items():
            cell = cells[j]
            if cell == "":
                raise fail(lineno, f"empty {name}")
            try:
                v = float(cell)
            except ValueError:
                raise fail(lineno, f"{name} {cell[:40]!r} is not a number") from None
            if not math.isfinite(v):
                raise fail(lineno, f"{name} is {cell[:10]}: every value must be finite")
            values[name][i] = v
    fname = freq[0]
    f = values[fname]
    rown = [r for r, _ in body]
    for i in range(n):
        if f[i] <= 0:
            raise fail(rown[i], f"{fname} {f[i]:g} is not positive")
        if i and f[i] <= f[i - 1]:
            what = "repeats" if f[i] == f[i - 1] else "is below"
            raise fail(rown[i], f"{fname} {f[i]:g} {what} the previous row's {f[i - 1]:g}: "
                                "frequencies must increase strictly")
    if mags[0] == "magnitude":
        mag = values["magnitude"]
        bad = np.flatnonzero(mag <= 0)
        if bad.size:
            raise fail(rown[bad[0]], f"magnitude {mag[bad[0]]:g} is not positive "
                                     "(absolute magnitude; use magnitude_db for dB)")
        lnmag = np.log(mag)
    else:
        db = values["magnitude_db"]
        out = np.flatnonzero(np.abs(db) > 3000.0)
        if out.size:
            raise fail(rown[out[0]], f"magnitude_db {db[out[0]]:g} is out of range "
                                     "(beyond ±3000 dB)")
        lnmag = db * (math.log(10.0) / 20.0)
    ph = values["phase_deg"]
    jumps = np.flatnonzero(np.abs(np.diff(ph)) > 180.0)
    if jumps.size:
        k = int(jumps[0]) + 1
        raise fail(rown[k], f"phase_deg jumps by {ph[k] - ph[k - 1]:+.1f} from the previous "
                            "row (more than 180): unwrap the phase (or measure more densely)")
    coh: np.ndarray | None = None
    if "coherence" in values:
        coh = values["coherence"]
        bad = np.flatnonzero((coh < 0) | (coh > 1))
        if bad.size:
            raise fail(rown[bad[0]], f"coherence {coh[bad[0]]:g} is outside 0..1")
    w = f * _FREQ_COLS[fname]
    phase_rad = np.radians(ph)
    return MeasuredResponse(
        omega_rad_s=w,
        response=np.exp(lnmag + 1j * phase_rad),
        phase_rad=phase_rad,
        coherence=coh,
        source=source,
    )


# --------------------------------------------------------------------------------------
# the interpolant and its error estimate
# --------------------------------------------------------------------------------------
class SweepInterpolant:
    """P̂ in x = ln ω: PCHIP on the band, the low-frequency extrapolation below it
    (docs/measured-data.md, "Below the band"), the error estimate per interval."""

    def __init__(self, data: MeasuredResponse, plant_integrators: int) -> None:
        self.x = np.log(data.omega_rad_s)
        self.lnmag = np.log(np.abs(data.response))
        self.phase = data.phase_rad
        self.pm = PchipInterpolator(self.x, self.lnmag)
        self.pp = PchipInterpolator(self.x, self.phase)
        sm = CubicSpline(self.x, self.lnmag)
        sp = CubicSpline(self.x, self.phase)
        t = np.linspace(0.0, 1.0, 33)[1:-1]
        xs = self.x[:-1, None] + t[None, :] * np.diff(self.x)[:, None]
        # the estimate: the largest PCHIP − spline difference over the interval,
        # times a safety factor
        self.err_mag = ERROR_FACTOR * np.max(np.abs(self.pm(xs) - sm(xs)), axis=1)
        self.err_phase = ERROR_FACTOR * np.max(np.abs(self.pp(xs) - sp(xs)), axis=1)
        self.n_int = plant_integrators
        self.x_lo, self.x_hi = float(self.x[0]), float(self.x[-1])
        # the phase limit at ω → 0: −90° per integrator plus a multiple of 180°,
        # the one nearest the phase at the bottom of the band
        base = -0.5 * math.pi * plant_integrators
        k = round((float(self.phase[0]) - base) / math.pi)
        self.phase0 = base + k * math.pi
        # at the bottom of the band: the slope of ln|P̂| in ln ω and the magnitude error
        self.slope_lo = float(self.pm(self.x_lo, 1))
        self.err_mag_lo = float(self.err(np.array([self.x_lo]))[0][0])

    def eval(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """ln|P̂| and ∠P̂ (rad) at x (any shape), extrapolated below the band."""
        xc = np.clip(x, self.x_lo, self.x_hi)
        lm = self.pm(xc)
        ph = self.pp(xc)
        below = x < self.x_lo
        if np.any(below):
            d = x - self.x_lo
            lm = np.where(below, self.lnmag[0] - self.n_int * d, lm)
            ph = np.where(below, self.phase0 + (self.phase[0] - self.phase0) * np.exp(d), ph)
        return lm, ph

    def err(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The error estimate (Np, rad) at x: the largest over the interval holding x
        and its two neighbours (PCHIP's slopes at the interval's ends come from them)."""
        i = np.clip(np.searchsorted(self.x, x) - 1, 0, self.x.size - 2)
        lo = np.maximum(i - 1, 0)
        hi = np.minimum(i + 1, self.x.size - 2)
        em = np.maximum(np.maximum(self.err_mag[lo], self.err_mag[i]), self.err_mag[hi])
        ep = np.maximum(np.maximum(self.err_phase[lo], self.err_phase[i]), self.err_phase[hi])
        return em, ep


#: The interpolant of each sweep (per integrator count), built once: the search's
#: refinement evaluates one design at a time, thousands of times, on one sweep.
_INTERPOLANTS: weakref.WeakKeyDictionary[MeasuredResponse, dict[int, SweepInterpolant]] = \
    weakref.WeakKeyDictionary()


def interpolant(data: MeasuredResponse, plant_integrators: int) -> SweepInterpolant:
    """The :class:`SweepInterpolant` of ``data`` (cached; a sweep is immutable)."""
    per = _INTERPOLANTS.setdefault(data, {})
    if plant_integrators not in per:
        per[plant_integrators] = SweepInterpolant(data, plant_integrators)
    return per[plant_integrators]


def estimate_integrators(data: MeasuredResponse) -> int:
    """Round(−slope) of ln|P| versus ln ω over the lowest three points, not below 0."""
    x = np.log(data.omega_rad_s[:3])
    y = np.log(np.abs(data.response[:3]))
    slope = float(np.polyfit(x, y, 1)[0])
    return max(0, int(round(-slope)))
