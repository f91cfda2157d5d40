"""Frozen views of a validated document: the base of the layout's views (io/layout.py) and the
recipe's (config/views.py).

A recipe or layout is validated into a plain dict (config/recipe.py): that dict is what is hashed
and stored, and it stays as it is. A view is built once from it and read by attribute; every
attribute is named as its key, every default is already filled by the schema, and lists are held
as tuples, so nothing downstream can change the document after it was hashed. The base lives here,
on the lowest floor that reads a document (io reads the layout), so both kinds share one.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from typing import Any, ClassVar


def _freeze(value: Any) -> Any:
    """Lists (and lists of lists) as tuples, so that a view holds nothing mutable."""
    if isinstance(value, (list, tuple)):
        return tuple(_freeze(v) for v in value)
    return value


def _thaw(value: Any) -> Any:
    if isinstance(value, View):
        return value.as_dict()
    if isinstance(value, tuple):
        return [_thaw(v) for v in value]
    return value


def _nested(sub, value: Any) -> Any:
    """A mapping as its view class; any other form a key may take (a name, say) as it is."""
    return sub.of(value) if isinstance(value, dict) else value


@dataclass(frozen=True)
class View:
    """Base of the views: built from the validated mapping of one schema node (``of``)."""

    # key -> the view class of its value (of each item, for a list) where the value is a mapping;
    # other values are kept as validated, lists as tuples
    NESTED: ClassVar[dict] = {}

    @classmethod
    def of(cls, data: dict | None):
        """The view of one validated mapping (None stays None: an optional section left out)."""
        if data is None:
            return None
        values = {}
        for f in fields(cls):
            value = data[f.name]  # validated: every key of the node is there, defaults filled
            sub = cls.NESTED.get(f.name)
            if sub is not None and value is not None:
                value = tuple(_nested(sub, v) for v in value) if isinstance(value, list) else _nested(sub, value)
            values[f.name] = _freeze(value)
        return cls(**values)

    def as_dict(self) -> dict:
        """The mapping again, as validated (tuples as lists), e.g. for a record written as JSON."""
        return {f.name: _thaw(getattr(self, f.name)) for f in fields(self)}
