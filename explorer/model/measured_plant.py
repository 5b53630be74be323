"""A measured plant of a study: the sweep, the rational-plus-delay model fitted to it,
and what the data cannot show (docs/measured-data.md)."""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

from explorer.model.fit import FitResult, fit_model
from explorer.model.sweep import (
    MeasuredResponse,
    SweepInterpolant,
    estimate_integrators,
    interpolant,
)

__all__ = ["MeasuredPlant", "measured_plant"]


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
        return estimate_integrators(self.data)

    def interpolant(self) -> SweepInterpolant:
        return interpolant(self.data, self.plant_integrators)

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


def measured_plant(
    data: MeasuredResponse,
    *,
    unstable_poles: int = 0,
    integrators: int | None = None,
    shown: str | None = None,
) -> MeasuredPlant:
    """Fit the model and bundle it with the data. A fit whose integrators differ from
    the plant's (given or estimated) is marked poor: its step responses would be of
    another plant type."""
    fit = fit_model(data, unstable_poles=unstable_poles)
    n_int = integrators if integrators is not None else estimate_integrators(data)
    if fit.model.n_integrators != n_int:
        fit = replace(
            fit,
            poor=True,
            notes=(
                *fit.notes,
                (
                    f"the fit has {fit.model.n_integrators} integrator(s), the plant "
                    f"{n_int} ({'given' if integrators is not None else 'estimated'}): "
                    "time-domain figures are withheld (null)"
                ),
            ),
        )
    return MeasuredPlant(
        data=data,
        fit=fit,
        unstable_poles=unstable_poles,
        integrators=integrators,
        shown=shown or data.source,
    )
