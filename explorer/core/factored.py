"""A transfer function in factored form as text: the one printer of the package.

``gain · ∏ factors(zeros) / ∏ factors(poles)``, a real root r as (s − r), a complex pair
r, r̄ as the quadratic (s² − 2·Re r·s + |r|²), roots at the origin as s. One walk over
the roots, two renderings:

- ``plain``: ASCII for the terminal and the implementation hand-off, copy-pastable:
  ``2.5 (s+0.02) / s(s+0.25)``; the variable may be ``z`` (a discrete compensator);
- ``typeset``: for the report: ``2.5 · (s + 0.02) / [s (s + 0.25)]``, a multiple root
  at the origin as s², several factors below the bar in brackets.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from explorer.core.loop import root_from_json

__all__ = ["factored", "factored_record"]


def _factors(roots: Sequence[complex], var: str, digits: int, typeset: bool) -> list[str]:
    """One text per factor, in the roots' order (the lower member of a pair skipped)."""
    roots = [complex(r) for r in roots]
    out: list[str] = []
    n0 = sum(1 for r in roots if r == 0)
    if typeset and n0:
        out.append(var + ("", "", "²", "³")[n0] if n0 < 4 else f"{var}^{n0}")
    for r in roots:
        if r == 0:
            if not typeset:
                out.append(var)
        elif r.imag < 0:
            continue
        elif typeset:
            sign = "+" if r.real < 0 else "−"
            if r.imag == 0:
                out.append(f"({var} {sign} {abs(r.real):.{digits}g})")
            else:
                out.append(
                    f"({var}² {sign} {abs(2 * r.real):.{digits}g}{var} + {abs(r) ** 2:.{digits}g})"
                )
        elif r.imag == 0:
            out.append(f"({var}{-r.real:+.{digits}g})")
        else:
            out.append(f"({var}^2{-2 * r.real:+.{digits}g}{var}{abs(r) * abs(r):+.{digits}g})")
    return out


def factored(
    gain: float,
    zeros: Sequence[complex],
    poles: Sequence[complex],
    *,
    var: str = "s",
    digits: int = 4,
    sep: str = "",
    typeset: bool = False,
) -> str:
    """``gain``, ``zeros`` and ``poles`` as factored text. Roots with ``digits``
    significant digits; the gain with 6 (plain) or 5 (typeset). ``sep`` joins the plain
    factors (typeset factors are joined by a space)."""
    num = _factors(zeros, var, digits, typeset)
    den = _factors(poles, var, digits, typeset)
    if typeset:
        g = f"{float(gain):.5g}"
        n = " ".join(num)
        d = " ".join(den)
        if len(den) > 1:
            d = f"[{d}]"  # several factors below the bar
        if not num and not den:
            return g
        if not den:
            return f"{g} · {n}"
        return f"{g} / {d}" if not num else f"{g} · {n} / {d}"
    n, d = sep.join(num) or "1", sep.join(den) or "1"
    text = f"{float(gain):.6g}" + (f" {n}" if n != "1" else "")
    return text + (f" / {d}" if d != "1" else "")


def factored_record(comp: dict[str, Any], **options: Any) -> str:
    """:func:`factored` of a JSON compensator object (``gain``, ``zeros``, ``poles``;
    roots as the strings or [re, im] pairs of :func:`explorer.core.loop.root_from_json`)."""
    return factored(
        float(comp["gain"]),
        [root_from_json(z) for z in comp.get("zeros", [])],
        [root_from_json(p) for p in comp.get("poles", [])],
        **options,
    )
