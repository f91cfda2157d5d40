"""A small declarative schema language: one definition gives validation and JSON Schema.

The recipe and layout formats are described once, with the node types below. The same
definition validates a YAML document (with messages that name the full key path and the
offending value, and a did-you-mean suggestion for unknown keys) and produces the JSON
Schema that ``initgen schema`` prints for editors. Nothing is written twice.
"""

from __future__ import annotations

import difflib
import math
import reprlib
from dataclasses import dataclass, field
from typing import Any

from initgen.errors import InputError

_MISSING = object()


def _where(path: str) -> str:
    return path or "(top level)"


_REPR = reprlib.Repr()
_REPR.maxstring = _REPR.maxother = 60
_REPR.maxlevel = 3


def _show(value: Any) -> str:
    # reprlib, not repr: a YAML alias bomb (lists of aliases of lists) must not be expanded
    text = _REPR.repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


@dataclass
class Node:
    """Base of all schema nodes."""

    doc: str = ""
    default: Any = _MISSING

    @property
    def required(self) -> bool:
        return self.default is _MISSING

    def validate(self, value: Any, path: str, kind: str) -> Any:  # pragma: no cover - abstract
        """The validated value (defaults filled); ``path`` is the key path so far and ``kind`` the
        document's kind ('recipe' or 'layout'), which messages name: "layout key roles.x: ..."."""
        raise NotImplementedError

    def json(self) -> dict:  # pragma: no cover - abstract
        raise NotImplementedError

    def _base(self, out: dict) -> dict:
        if self.doc:
            out["description"] = self.doc
        if self.default is not _MISSING and self.default is not None:
            out["default"] = self.default
        return out


@dataclass
class Num(Node):
    """A real number, with optional inclusive bounds and a unit that the key name also carries."""

    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: float | None = None
    integer: bool = False
    unit: str = ""
    doc_hint_over: str = ""  # added to the message when a value is above the maximum

    def validate(self, value, path, kind):
        what = "an integer" if self.integer else "a number"
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise InputError(f"{kind} key {_where(path)}: must be {what}, got {_show(value)}", key=_where(path))
        if self.integer and not isinstance(value, int):
            if float(value).is_integer():
                value = int(value)
            else:
                raise InputError(f"{kind} key {_where(path)}: must be {what}, got {_show(value)}", key=_where(path))
        try:
            finite = math.isfinite(value)
        except OverflowError:  # an integer too large for a float
            finite = False
        if not finite:
            raise InputError(f"{kind} key {_where(path)}: must be a finite number, got {_show(value)}", key=_where(path))
        unit = f" {self.unit}" if self.unit else ""
        if self.minimum is not None and value < self.minimum:
            raise InputError(f"{kind} key {path}: must be >= {self.minimum}{unit}, got {value}", key=path)
        if self.exclusive_minimum is not None and value <= self.exclusive_minimum:
            raise InputError(f"{kind} key {path}: must be > {self.exclusive_minimum}{unit}, got {value}", key=path)
        if self.maximum is not None and value > self.maximum:
            hint = self.doc_hint_over if self.doc_hint_over else ""
            raise InputError(f"{kind} key {path}: must be <= {self.maximum}{unit}, got {value}{hint}", key=path)
        return value if self.integer else float(value)  # 100 and 100.0 hash the same

    def json(self):
        out = {"type": "integer" if self.integer else "number"}
        if self.minimum is not None:
            out["minimum"] = self.minimum
        if self.exclusive_minimum is not None:
            out["exclusiveMinimum"] = self.exclusive_minimum
        if self.maximum is not None:
            out["maximum"] = self.maximum
        if self.unit:
            out["x-unit"] = self.unit
        return self._base(out)


@dataclass
class Str(Node):
    choices: tuple = ()
    pattern_doc: str = ""
    aliases: dict = field(default_factory=dict)  # accepted spelling -> the choice it stands for

    def validate(self, value, path, kind):
        if not isinstance(value, str) or not value.strip():
            raise InputError(f"{kind} key {_where(path)}: must be a non-empty string, got {_show(value)}", key=_where(path))
        value = self.aliases.get(value, value)  # e.g. 'centered' is read as 'centred' (and hashes alike)
        if self.choices and value not in self.choices:
            hint = difflib.get_close_matches(value, self.choices, n=1)
            extra = f" (did you mean '{hint[0]}'?)" if hint else ""
            raise InputError(
                f"{kind} key {path}: must be one of {', '.join(self.choices)}, got {_show(value)}{extra}", key=path)
        return value

    def json(self):
        out = {"type": "string"}
        if self.choices:
            out["enum"] = list(self.choices) + [a for a in self.aliases if a not in self.choices]
        return self._base(out)


@dataclass
class Bool(Node):
    def validate(self, value, path, kind):
        if not isinstance(value, bool):
            raise InputError(f"{kind} key {_where(path)}: must be true or false, got {_show(value)}", key=_where(path))
        return value

    def json(self):
        return self._base({"type": "boolean"})


@dataclass
class List(Node):
    item: Node = None
    min_items: int = 0
    max_items: int | None = None
    unique_key: str | None = None

    def validate(self, value, path, kind):
        if not isinstance(value, list):
            raise InputError(f"{kind} key {_where(path)}: must be a list, got {_show(value)}", key=_where(path))
        if len(value) < self.min_items:
            raise InputError(
                f"{kind} key {_where(path)}: needs at least {self.min_items} item(s), got {len(value)}", key=_where(path))
        if self.max_items is not None and len(value) > self.max_items:
            raise InputError(
                f"{kind} key {_where(path)}: takes at most {self.max_items} item(s), got {len(value)}", key=_where(path))
        out = [self.item.validate(v, f"{path}[{i}]", kind) for i, v in enumerate(value)]
        if self.unique_key:
            seen = set()
            for i, v in enumerate(out):
                key = v.get(self.unique_key) if isinstance(v, dict) else v
                # names become folder and file names: 'Warm' and 'warm' would collide on some systems
                shown = key
                key = key.casefold() if isinstance(key, str) else key
                if key in seen:
                    raise InputError(
                        f"{kind} key {path}[{i}].{self.unique_key}: duplicate name {_show(shown)} (names are compared without case); "
                        "give every entry its own name", key=f"{path}[{i}].{self.unique_key}")
                seen.add(key)
        return out

    def json(self):
        out = {"type": "array", "items": self.item.json()}
        if self.min_items:
            out["minItems"] = self.min_items
        if self.max_items is not None:
            out["maxItems"] = self.max_items
        return self._base(out)


@dataclass
class Obj(Node):
    """A mapping with known keys. Unknown keys are errors with a did-you-mean suggestion."""

    fields: dict = field(default_factory=dict)
    one_of: tuple = ()  # groups of keys of which exactly one must be present

    def validate(self, value, path, kind):
        if value is None and not self.required:
            value = {}
        if not isinstance(value, dict):
            raise InputError(f"{kind} key {_where(path)}: must be a mapping of keys, got {_show(value)}", key=_where(path))
        for key in value:
            if not isinstance(key, str):
                raise InputError(f"{kind} key {_where(path)}: keys must be strings, got {_show(key)}", key=_where(path))
            if key not in self.fields:
                hint = difflib.get_close_matches(key, list(self.fields), n=1)
                extra = f"; did you mean '{hint[0]}'?" if hint else f"; known keys: {', '.join(self.fields)}"
                raise InputError(f"{kind} key {_join(path, key)}: unknown key{extra}", key=f"{_join(path, key)}")
        for group in self.one_of:
            present = [k for k in group if value.get(k) is not None]  # "constant_K:" left empty is absent
            if len(present) != 1:
                got = ", ".join(present) if present else "none"
                raise InputError(
                    f"{kind} key {_where(path)}: give exactly one of {', '.join(group)} (got {got})", key=_where(path))
        out = {}
        for key, node in self.fields.items():
            sub = _join(path, key)
            if key in value and value[key] is not None:
                out[key] = node.validate(value[key], sub, kind)
            # an optional key written empty ("physics:" with nothing below) is the same as absent
            elif node.required and not any(key in g for g in self.one_of):
                raise InputError(f"{kind} key {sub}: is required ({node.doc or 'see initgen schema'})", key=sub)
            elif not node.required:
                default = node.default
                if isinstance(node, Obj) and default is None:
                    out[key] = None
                elif isinstance(default, (dict, list)):
                    out[key] = node.validate(default, sub, kind) if isinstance(node, Obj) else list(default)
                else:
                    out[key] = default
        return out

    def json(self):
        props = {k: n.json() for k, n in self.fields.items()}
        out = {"type": "object", "properties": props, "additionalProperties": False}
        req = [k for k, n in self.fields.items() if n.required and not any(k in g for g in self.one_of)]
        if req:
            out["required"] = req
        if self.one_of:
            clauses = [
                {"oneOf": [{"required": [k]} for k in group]} for group in self.one_of
            ]
            if len(clauses) == 1:
                out.update(clauses[0])
            else:
                out["allOf"] = clauses
        return self._base(out)


@dataclass
class AnyOf(Node):
    """A value that may take one of several forms (tried in order; the first that fits wins)."""

    options: tuple = ()
    names: tuple = ()

    def validate(self, value, path, kind):
        errors = []
        for opt in self.options:
            try:
                return opt.validate(value, path, kind)
            except InputError as exc:
                errors.append(exc)
        forms = " or ".join(self.names) if self.names else "one of the documented forms"
        # report the error of the form whose JSON type matches the value, if any
        for opt, err in zip(self.options, errors):
            if _type_matches(opt, value):
                raise InputError(str(err), key=err.key)
        raise InputError(f"{kind} key {_where(path)}: must be {forms}, got {_show(value)}", key=_where(path))

    def json(self):
        return self._base({"anyOf": [o.json() for o in self.options]})


def _type_matches(node: Node, value: Any) -> bool:
    if isinstance(node, Obj):
        return isinstance(value, dict)
    if isinstance(node, List):
        return isinstance(value, list)
    if isinstance(node, Str):
        return isinstance(value, str)
    if isinstance(node, Num):
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    return False


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else key


def walk_reference(node: Node, path: str = "") -> list[tuple[str, str, str, str]]:
    """Flatten a schema into (key path, type, unit/default, description) rows for the docs."""
    rows = []
    if isinstance(node, Obj):
        for key, sub in node.fields.items():
            p = _join(path, key)
            rows.append((p, _type_name(sub), _default_text(sub), sub.doc))
            rows.extend(walk_reference(sub, p))
    elif isinstance(node, List):
        rows.extend(walk_reference(node.item, path + "[]"))
    elif isinstance(node, AnyOf):
        for opt in node.options:
            rows.extend(walk_reference(opt, path))
    return rows


def _type_name(node: Node) -> str:
    if isinstance(node, Num):
        base = "integer" if node.integer else "number"
        return f"{base} [{node.unit}]" if node.unit else base
    if isinstance(node, Str):
        return "one of " + "/".join(node.choices) if node.choices else "string"
    if isinstance(node, Bool):
        return "boolean"
    if isinstance(node, List):
        return "list"
    if isinstance(node, Obj):
        return "mapping"
    if isinstance(node, AnyOf):
        return " or ".join(node.names) if node.names else "any of several forms"
    return "?"


def _default_text(node: Node) -> str:
    if node.required:
        return "required"
    if node.default is None:
        return "optional"
    return f"default {node.default!r}"
