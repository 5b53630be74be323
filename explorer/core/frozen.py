"""Read-only JSON-shaped values: the base of the typed, frozen output records.

A record class (a frozen dataclass) derives from :class:`JsonView` and says, in
:meth:`JsonView._json_items`, which JSON keys it stands for and in what order. It then
reads like its JSON object (``record["key"]``, ``record.get``, ``dict(record)``,
equality with a plain dict), every nested value is read-only (:func:`frozen_view`),
and :meth:`JsonView.to_json` is its one serializer (plain dicts and lists, as
:func:`explorer.core.json_text.json_text` writes them).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from types import MappingProxyType
from typing import Any

__all__ = ["JsonView", "ReadOnlyList", "frozen_view", "plain"]


class ReadOnlyList(tuple):
    """A JSON array that cannot be changed: a tuple that compares equal to the list
    with the same items (so a record equals its JSON object read back)."""

    __slots__ = ()

    def __eq__(self, other: object) -> bool:
        if isinstance(other, list):
            return list(self) == other
        return tuple.__eq__(self, other)

    def __ne__(self, other: object) -> bool:
        return not self == other

    __hash__ = tuple.__hash__


def frozen_view(value: Any) -> Any:
    """``value`` made read-only all the way down: dicts become immutable mappings,
    lists :class:`ReadOnlyList`; other values as they are."""
    if isinstance(value, Mapping):
        return MappingProxyType({k: frozen_view(v) for k, v in value.items()})
    if isinstance(value, (list, tuple)):
        return ReadOnlyList(frozen_view(v) for v in value)
    return value


def plain(value: Any) -> Any:
    """A read-only value as plain dicts and lists."""
    if isinstance(value, Mapping):
        return {k: plain(v) for k, v in value.items()}
    if isinstance(value, tuple):
        return [plain(v) for v in value]
    return value


class JsonView(Mapping[str, Any]):
    """Mapping access to a frozen record's JSON object (see the module docstring)."""

    __slots__ = ()

    def _json_items(self) -> dict[str, Any]:
        """The JSON object's keys and values, in order (subclasses say)."""
        raise NotImplementedError

    def _view(self) -> Mapping[str, Any]:
        cache = self.__dict__.get("_json_view_cache")
        if cache is None:
            cache = frozen_view(self._json_items())
            self.__dict__["_json_view_cache"] = cache  # frozen dataclass: bypass setattr
        return cache

    def to_json(self) -> dict[str, Any]:
        """The JSON object as plain dicts and lists (the one serializer)."""
        return plain(self._view())

    def __getitem__(self, key: str) -> Any:
        return self._view()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._view())

    def __len__(self) -> int:
        return len(self._view())
