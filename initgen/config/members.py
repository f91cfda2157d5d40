"""A recipe's ensemble members: the ``members`` section expanded into one dict per member.

The section's schema (``MEMBER``, ``MEMBERS``) is part of the recipe format in
:mod:`initgen.config.recipe`; here are the rules a per-key schema cannot say: member names usable
as file names, generated names, signs, and an output template that names every member apart.
"""

from __future__ import annotations

import string
from pathlib import Path

from initgen.config.views import MemberSpec
from initgen.errors import InputError

MEMBER_TEMPLATE_FIELDS = ("member", "input_stem", "input_name")

_NAME_OK = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789-_.+")


def expand_members(data: dict) -> list[MemberSpec]:
    """The recipe's members (name, scale, sign, offset_K), in order; [] without a members section.

    A generated set (``scales`` x ``signs``) names each member ``<direction>-x<scale>``: the
    direction is ``warm``/``cold`` when every perturbation has a ``constant_K`` anomaly of one sign
    (so the name says which way the member moves the temperature), else ``plus``/``minus`` for
    sign +1/-1. Checks: names usable as file names, no duplicates, signs +1/-1, an output template
    that names every member apart, no donor anomalies (a member scales an anomaly; a blend has none).
    """
    mem = data.get("members")
    if not mem:
        return []
    for i, block in enumerate(data["perturbations"]):
        if block["anomaly"].get("donor"):
            raise InputError(f"recipe key perturbations[{i}].anomaly.donor: a donor blend cannot be scaled per "
                             "member; use constant_K, field or bias with members, or drop the members section", key=f"perturbations[{i}].anomaly.donor")
    if mem.get("list"):
        if mem.get("signs") is not None:
            raise InputError("recipe key members.signs: belongs to a generated set (scales); give each listed "
                             "member its own sign", key="members.signs")
        out = [dict(m) for m in mem["list"]]
        for i, m in enumerate(out):
            if m["sign"] not in (1, -1):
                raise InputError(f"recipe key members.list[{i}].sign: must be 1 or -1, got {m['sign']}", key=f"members.list[{i}].sign")
            _check_member_name(m["name"], f"members.list[{i}].name")
    else:
        signs = mem.get("signs") or [1, -1]
        for j, sg in enumerate(signs):
            if sg not in (1, -1):
                raise InputError(f"recipe key members.signs[{j}]: must be 1 or -1, got {sg}", key=f"members.signs[{j}]")
        consts = [b["anomaly"].get("constant_K") for b in data["perturbations"]]
        if all(c is not None and c > 0 for c in consts):
            label = {1: "warm", -1: "cold"}
        elif all(c is not None and c < 0 for c in consts):
            label = {1: "cold", -1: "warm"}
        else:
            label = {1: "plus", -1: "minus"}
        out, where = [], {}
        for i, sc in enumerate(mem["scales"]):
            for j, sg in enumerate(signs):
                name = f"{label[sg]}-x{float(sc)!r}"
                if name in where:
                    raise InputError(f"recipe key members.scales[{i}]: duplicate member name '{name}' "
                                     f"(same as {where[name]}); give every scale and sign once", key=f"members.scales[{i}]")
                where[name] = f"members.scales[{i}], members.signs[{j}]"
                out.append({"name": name, "scale": float(sc), "sign": int(sg), "offset_K": 0.0})
    _check_template(mem["output_template"], len(out))
    return [MemberSpec.of(m) for m in out]


def _check_member_name(name: str, key: str) -> None:
    if not set(name) <= _NAME_OK or name.startswith("."):
        raise InputError(f"recipe key {key}: member name {name!r} may hold only letters, digits, '-', '_', '.', "
                         "'+' and may not start with '.', because it names files and folders", key=key)


def _check_template(template: str, n_members: int) -> None:
    key = "members.output_template"
    try:
        fields = [f for _, f, _, _ in string.Formatter().parse(template) if f is not None]
    except ValueError as exc:
        raise InputError(f"recipe key {key}: {template!r} is not a valid template ({exc})", key=key) from None
    for f in fields:
        if f not in MEMBER_TEMPLATE_FIELDS:
            raise InputError(f"recipe key {key}: unknown field {{{f}}} in {template!r}; use "
                             + ", ".join("{" + k + "}" for k in MEMBER_TEMPLATE_FIELDS), key=key)
    if n_members > 1 and "member" not in fields:
        raise InputError(f"recipe key {key}: {template!r} has no {{member}}, so the members would overwrite "
                         "each other; put {member} in the file or folder name", key=key)
    parts = Path(template).parts
    if Path(template).is_absolute() or ".." in parts or not parts:
        raise InputError(f"recipe key {key}: {template!r} must be a relative path inside the output folder "
                         "(no leading '/', no '..')", key=key)
