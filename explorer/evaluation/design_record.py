"""The DESIGN record (docs/interface.md), typed and frozen.

A :class:`DesignRecord` holds one judged design: its name and origin, the compensator
(an :class:`explorer.core.loop.Rational`), the verdict, the METRICS and the project's
extensions (``extras``: the worst case over a family, the sampled loop, the data's
band, the trial number...). It cannot be changed after it is made; a later stage that
adds to it (the Pareto flag, the practical misses) makes a new one with
:meth:`DesignRecord.with_changes`.

It is a :class:`explorer.core.frozen.JsonView`: it reads like the JSON object it
stands for: ``record["metrics"]["phase_margin_deg"]``,
``record.get("worst")``, ``dict(record)``. Those reads are read-only views: the
metrics and every nested object are immutable mappings and tuples. :meth:`to_json`
is the one serializer; :func:`explorer.core.json_text.json_text` writes a record
through it. Key order is the interface's: name, origin, structure, order,
compensator, meets_targets, pareto, metrics, margins_valid, misses, then the extras
in the order they were added.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from explorer.core.frozen import JsonView, ReadOnlyList, frozen_view
from explorer.core.loop import Rational

__all__ = ["DesignRecord", "CORE_KEYS"]

#: The interface's DESIGN keys in their order (docs/interface.md); ``misses`` is a
#: project extension that sits with them.
CORE_KEYS = ("name", "origin", "structure", "order", "compensator", "meets_targets",
             "pareto", "metrics", "margins_valid", "misses")


@dataclass(frozen=True, kw_only=True, eq=False)
class DesignRecord(JsonView):
    """One judged design (docs/interface.md, DESIGN)."""

    name: str
    origin: str
    structure: str
    compensator: Rational
    meets_targets: bool | None
    pareto: bool | None = None
    metrics: Mapping[str, Any]
    misses: tuple[str, ...] | None = None
    extras: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        clash = set(self.extras) & set(CORE_KEYS)
        if clash:
            raise ValueError(f"extras may not replace the DESIGN keys {sorted(clash)}")
        object.__setattr__(self, "metrics", frozen_view(self.metrics))
        object.__setattr__(self, "extras", frozen_view(self.extras))
        if self.misses is not None:
            object.__setattr__(self, "misses", ReadOnlyList(self.misses))

    # -- derived keys --------------------------------------------------------------
    @property
    def order(self) -> int:
        return self.compensator.order

    @property
    def margins_valid(self) -> bool:
        """The margins and peaks of an unstable loop are not robustness margins."""
        return bool(self.metrics.get("closed_loop_stable"))

    # -- changes make a new record ---------------------------------------------------
    def with_changes(self, **changes: Any) -> DesignRecord:
        """A copy with fields changed; ``extras`` given here are added to (or replace
        entries of) the existing ones, keeping their order."""
        more = changes.pop("extras", None)
        if more:
            changes["extras"] = {**self.extras, **more}
        return replace(self, **changes)

    # -- the JSON object ---------------------------------------------------------------
    def _json_items(self) -> dict[str, Any]:
        items: dict[str, Any] = {
            "name": self.name,
            "origin": self.origin,
            "structure": self.structure,
            "order": self.order,
            "compensator": self.compensator.to_dict(),
            "meets_targets": self.meets_targets,
            "pareto": self.pareto,
            "metrics": self.metrics,
            "margins_valid": self.margins_valid,
        }
        if self.misses is not None:
            items["misses"] = self.misses
        items.update(self.extras)
        return items

    def __repr__(self) -> str:
        return (f"DesignRecord(name={self.name!r}, origin={self.origin!r}, "
                f"structure={self.structure!r}, order={self.order}, "
                f"meets_targets={self.meets_targets!r})")

