"""The ledger as typed, read-only values: the one place that knows the ledger's shape.

:meth:`initgen.engine.ledger.Ledger.finish` builds a :class:`LedgerView` from these dataclasses
(``plan.run`` adds ``water`` and ``data_blocks_read`` with :func:`dataclasses.replace`), and
:meth:`LedgerView.to_dict` is the dict the provenance record stores as JSON and ``api.preview``
returns: the writer spells no key of its own. :meth:`LedgerView.from_dict` reads such a dict back
into the same view, and ``to_dict`` of that gives it again, key for key and in the same order, so
the JSON of a record stays byte-identical. A record written by an earlier initgen still reads: a key it lacks becomes None
(or an empty tuple or mapping), and :meth:`to_dict` leaves it out again. Keys this module does
not know are kept in ``extra`` and written back after the known ones.

The reports (``initgen.reports``) and the collation (``initgen.outputs.collate``) read the ledger
through this view only, never by string keys of their own.

Examples
--------
>>> view = LedgerView.from_dict({"region": {"cells_weight_above_0": 3, "cells_full_weight": 1,
...                                         "area_m2": 2.0e6, "area_is": "cell area"}})
>>> view.region.area_m2, view.persistence, view.clamps
(2000000.0, None, {})
>>> view.to_dict()["region"]["cells_full_weight"]
1
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field, fields
from typing import Any, Mapping

#: The soil variables whose per-layer rows carry the layer's node depth.
SOIL_ROLES = ("soil_temperature", "soil_liquid", "soil_ice")

_TOTAL = re.compile(r"^(?P<name>.+)_region_total_(?P<unit>J|kg)$")
_PER_LAYER = re.compile(r"^(?P<name>.+)_per_layer_(?P<unit>J|kg)_m2$")


def _tuple(x) -> tuple | None:
    return None if x is None else tuple(x)


def _list(x) -> list | None:
    return None if x is None else list(x)


def _put(out: dict, key: str, value) -> None:
    """Set ``key`` only when the value is there (None: the ledger did not have the key)."""
    if value is not None:
        out[key] = value


def _extra(d: Mapping, known) -> dict:
    return {k: v for k, v in d.items() if k not in known}


class _Flat:
    """A ledger section whose keys are the dataclass's fields, in the ledger's order, with the
    values as the ledger holds them; an ``extra`` field keeps the keys this version does not know."""

    _OMIT_NONE = False   # True: a field that is None is a key the ledger did not have

    @classmethod
    def _names(cls) -> list[str]:
        return [f.name for f in fields(cls) if f.name != "extra"]

    @classmethod
    def from_dict(cls, d: Mapping | None):
        d = d or {}
        names = cls._names()
        kw = {k: d.get(k) for k in names}
        if "extra" in {f.name for f in fields(cls)}:
            kw["extra"] = _extra(d, names)
        return cls(**kw)

    def to_dict(self) -> dict:
        out = {k: getattr(self, k) for k in self._names()}
        if self._OMIT_NONE:
            out = {k: v for k, v in out.items() if v is not None}
        out.update(getattr(self, "extra", {}))
        return out


@dataclass(frozen=True)
class SoilLayer(_Flat):
    """One soil layer's geometry (m; None where not known) and where it came from."""

    top_m: float | None = None
    bottom_m: float | None = None
    node_m: float | None = None
    source: str | None = None


@dataclass(frozen=True)
class Grid:
    """The model grid as the run saw it."""

    kind: str | None = None
    shape: tuple | None = None
    dims: tuple | None = None
    cell_area: str | None = None
    roles_from: str | None = None
    soil_layers: tuple[SoilLayer, ...] | None = None
    extra: Mapping = field(default_factory=dict)

    KEYS = ("kind", "shape", "dims", "cell_area", "roles_from", "soil_layers")

    @classmethod
    def from_dict(cls, d: Mapping | None) -> "Grid":
        d = d or {}
        layers = d.get("soil_layers")
        return cls(d.get("kind"), _tuple(d.get("shape")), _tuple(d.get("dims")), d.get("cell_area"),
                   d.get("roles_from"), None if layers is None else tuple(SoilLayer.from_dict(x) for x in layers),
                   _extra(d, cls.KEYS))

    def to_dict(self) -> dict:
        return {"kind": self.kind, "shape": _list(self.shape), "dims": _list(self.dims), "cell_area": self.cell_area,
                "roles_from": self.roles_from,
                "soil_layers": None if self.soil_layers is None else [s.to_dict() for s in self.soil_layers],
                **self.extra}


@dataclass(frozen=True)
class Region(_Flat):
    """The region: cells with weight > 0 and at full weight; its area (None without cell areas)."""

    cells_weight_above_0: int | None = None
    cells_full_weight: int | None = None
    area_m2: float | None = None
    area_is: str | None = None
    extra: Mapping = field(default_factory=dict)


@dataclass(frozen=True)
class Block:
    """One perturbation block: its targets, reach, factors and the member's anomaly over it
    (``anomaly_K``: min, max, mean; empty when no cell has weight; None for a donor blend)."""

    name: str
    targets: tuple = ()
    cells_weight_above_0: int | None = None
    layer_factors: tuple | None = None
    surface_factor: float | None = None
    anomaly_K: Mapping | None = None
    extra: Mapping = field(default_factory=dict)

    KEYS = ("name", "targets", "cells_weight_above_0", "layer_factors", "surface_factor", "anomaly_K")

    @classmethod
    def from_dict(cls, d: Mapping) -> "Block":
        return cls(d.get("name"), tuple(d.get("targets") or ()), d.get("cells_weight_above_0"),
                   _tuple(d.get("layer_factors")), d.get("surface_factor"), d.get("anomaly_K"), _extra(d, cls.KEYS))

    def to_dict(self) -> dict:
        return {"name": self.name, "targets": list(self.targets), "cells_weight_above_0": self.cells_weight_above_0,
                "layer_factors": _list(self.layer_factors), "surface_factor": self.surface_factor,
                "anomaly_K": None if self.anomaly_K is None else dict(self.anomaly_K), **self.extra}


@dataclass(frozen=True)
class LayerRow:
    """Statistics of one layer's change (physical units of the variable): cells in the region and
    changed, min / mean / max over the region's valid cells and the area-weighted mean; the node
    depth for soil variables."""

    layer: int
    cells_in_region: int | None = None
    cells_changed: int | None = None
    min: float | None = None
    mean: float | None = None
    max: float | None = None
    area_weighted_mean: float | None = None
    node_depth_m: float | None = None

    @classmethod
    def from_dict(cls, d: Mapping) -> "LayerRow":
        return cls(d.get("layer"), d.get("cells_in_region"), d.get("cells_changed"), d.get("min"), d.get("mean"),
                   d.get("max"), d.get("area_weighted_mean"), d.get("node_depth_m"))

    def to_dict(self) -> dict:
        out = {"layer": self.layer}
        _put(out, "cells_in_region", self.cells_in_region)
        out.update({"cells_changed": self.cells_changed, "min": self.min, "mean": self.mean, "max": self.max,
                    "area_weighted_mean": self.area_weighted_mean})
        _put(out, "node_depth_m", self.node_depth_m)
        return out


@dataclass(frozen=True)
class Variable:
    """One changed variable (or ``a+b`` for a role held in one variable per layer): its role,
    units and per-layer rows (``layered``) or one row for a horizontal field."""

    name: str
    role: str | None
    units: str | None
    layered: bool
    rows: tuple[LayerRow, ...]

    @classmethod
    def from_dict(cls, name: str, d: Mapping) -> "Variable":
        layered = "layers" in d
        rows = d.get("layers") if layered else ([d["field"]] if d.get("field") is not None else [])
        return cls(name, d.get("role"), d.get("units"), layered, tuple(LayerRow.from_dict(r) for r in rows or ()))

    def to_dict(self) -> dict:
        rows = [r.to_dict() for r in self.rows]
        return {"role": self.role, "units": self.units,
                **({"layers": rows} if self.layered else {"field": rows[0] if rows else None})}

    @property
    def node_depths(self) -> list:
        """The node depth of each row (None where the row has none)."""
        return [r.node_depth_m for r in self.rows]


@dataclass(frozen=True)
class Invariants(_Flat):
    """The physics' promises, measured on the changed soil layer-cells (None: not measured, or a
    record that predates the count)."""

    cells_checked: int | None = None
    water_change_region_kg: float | None = None
    water_change_relative: float | None = None
    cells_change_opposite_to_imposed: int | None = None
    cells_made_inconsistent: int | None = None
    cells_change_beyond_imposed: int | None = None            # energy mode
    cells_phase_change_beyond_energy: int | None = None       # energy mode
    max_energy_budget_rel_error: float | None = None          # energy mode
    cells_change_not_equal_to_imposed: int | None = None      # temperature mode
    meaning: str | None = None

    _OMIT_NONE = True

    def counts(self) -> list[tuple[str, Any]]:
        """(name, value) of every measured invariant, without the ``meaning`` sentence."""
        return [(k, v) for k, v in self.to_dict().items() if k != "meaning"]


@dataclass(frozen=True)
class PhaseQuantity:
    """One accumulated phase or energy quantity (``sensible``, ``latent``, ``frozen``, ``melted``,
    ``snow_melted``, ...) in J or kg: the region total (None without cell areas) and per layer
    per m2 of region."""

    name: str
    unit: str
    region_total: float | None
    per_layer_m2: tuple | None

    @property
    def total_key(self) -> str:
        return f"{self.name}_region_total_{self.unit}"

    @property
    def per_layer_key(self) -> str:
        return f"{self.name}_per_layer_{self.unit}_m2"

    @property
    def snow(self) -> bool:
        """True for quantities of snow layers, not soil layers."""
        return self.name.startswith("snow_")


@dataclass(frozen=True)
class Physics:
    """The physics part: mode, phase rule, where the soil parameters came from, the measured
    invariants and the phase and energy quantities."""

    mode: str | None = None
    phase_rule: str | None = None
    soil_parameters: Mapping | None = None
    totals_left_out: str | None = None
    invariants: Invariants | None = None
    quantities: tuple[PhaseQuantity, ...] = ()
    extra: Mapping = field(default_factory=dict)

    KEYS = ("mode", "phase_rule", "soil_parameters", "totals_left_out", "invariants")

    @classmethod
    def from_dict(cls, d: Mapping | None) -> "Physics":
        d = d or {}
        found: dict = {}   # (name, unit) -> [total, per layer], in the ledger's order
        extra = {}
        for k, v in d.items():
            if k in cls.KEYS:
                continue
            m = _TOTAL.match(k) or (_PER_LAYER.match(k) if isinstance(v, list) else None)
            if m is None:
                extra[k] = v
                continue
            slot = found.setdefault((m["name"], m["unit"]), [None, None])
            slot[0 if m.re is _TOTAL else 1] = v
        inv = d.get("invariants")
        return cls(d.get("mode"), d.get("phase_rule"), d.get("soil_parameters"), d.get("totals_left_out"),
                   None if inv is None else Invariants.from_dict(inv),
                   tuple(PhaseQuantity(n, u, t, _tuple(p)) for (n, u), (t, p) in found.items()), extra)

    def to_dict(self) -> dict:
        out = {"mode": self.mode}
        _put(out, "phase_rule", self.phase_rule)
        _put(out, "soil_parameters", None if self.soil_parameters is None else dict(self.soil_parameters))
        _put(out, "totals_left_out", self.totals_left_out)
        _put(out, "invariants", None if self.invariants is None else self.invariants.to_dict())
        for q in self.quantities:
            _put(out, q.total_key, q.region_total)
            _put(out, q.per_layer_key, _list(q.per_layer_m2))
        out.update(self.extra)
        return out

    @property
    def totals(self) -> list[tuple[str, float]]:
        """(key, value) of every region total (``*_region_total_J``, ``*_region_total_kg``)."""
        return [(q.total_key, q.region_total) for q in self.quantities if q.region_total is not None]

    def per_layer(self, snow: bool = False) -> list[tuple[str, list]]:
        """(key, values per m2 of region) of the per-soil-layer series, or with ``snow`` the per-snow-layer ones."""
        return [(q.per_layer_key, list(q.per_layer_m2)) for q in self.quantities
                if q.per_layer_m2 is not None and q.snow == snow]

    def quantity(self, name: str) -> PhaseQuantity | None:
        """The quantity called ``name`` (e.g. ``sensible``), None when the ledger has none."""
        return next((q for q in self.quantities if q.name == name), None)

    def region_total(self, name: str) -> float | None:
        """The region total of quantity ``name`` (J or kg), None when the ledger has none."""
        q = self.quantity(name)
        return None if q is None else q.region_total

    def column_per_m2(self, name: str) -> float | None:
        """Quantity ``name`` summed over the layers, per m2 of region; None when the ledger has none."""
        q = self.quantity(name)
        return None if q is None or q.per_layer_m2 is None else float(sum(q.per_layer_m2))


@dataclass(frozen=True)
class MemberFactors(_Flat):
    """The ensemble member's factors the run used (scale x sign, offset, noise or not)."""

    scale_times_sign: float | None = None
    offset_K: float | None = None
    noise: bool | None = None


@dataclass(frozen=True)
class LayerBounds:
    """Top and bottom of each soil layer (m; None where the file gives no interfaces)."""

    top_m: tuple
    bottom_m: tuple

    @classmethod
    def from_dict(cls, d: Mapping) -> "LayerBounds":
        return cls(tuple(d.get("top_m") or ()), tuple(d.get("bottom_m") or ()))

    def to_dict(self) -> dict:
        return {"top_m": list(self.top_m), "bottom_m": list(self.bottom_m)}


@dataclass(frozen=True)
class Disequilibrium:
    """Per layer, the input's region cells off the freezing curve of the soil parameters used and the
    water (kg) the equilibrium rule would freeze and melt there; whether the run acted on them."""

    cells_per_layer: tuple = ()
    would_freeze_kg_per_layer: tuple = ()
    would_melt_kg_per_layer: tuple = ()
    inconsistent_per_layer: tuple | None = None
    acted_on: bool | None = None
    meaning: str | None = None

    @classmethod
    def from_dict(cls, d: Mapping) -> "Disequilibrium":
        return cls(tuple(d.get("cells_per_layer") or ()), tuple(d.get("equilibrium_rule_would_freeze_kg_per_layer") or ()),
                   tuple(d.get("equilibrium_rule_would_melt_kg_per_layer") or ()),
                   _tuple(d.get("cells_inconsistent_with_one_sided_rule_per_layer")), d.get("acted_on"),
                   d.get("meaning"))

    def to_dict(self) -> dict:
        out = {"cells_per_layer": list(self.cells_per_layer),
               "equilibrium_rule_would_freeze_kg_per_layer": list(self.would_freeze_kg_per_layer),
               "equilibrium_rule_would_melt_kg_per_layer": list(self.would_melt_kg_per_layer)}
        _put(out, "cells_inconsistent_with_one_sided_rule_per_layer", _list(self.inconsistent_per_layer))
        _put(out, "acted_on", self.acted_on)
        _put(out, "meaning", self.meaning)
        return out

    @property
    def cells(self) -> int:
        """Region layer-cells off the curve, all layers."""
        return int(sum(self.cells_per_layer))


@dataclass(frozen=True)
class Persistence:
    """The persistence estimate (see :mod:`initgen.engine.persistence`): the heat anomaly left
    after each horizon, or why it was not estimated (``not_estimated``)."""

    horizons_days: tuple | None = None
    remaining_fraction: tuple | None = None
    not_estimated: str | None = None
    remaining_change_per_layer_K: tuple | None = None
    columns: int | None = None
    columns_left_out: int | None = None
    conductivity_source: str | None = None
    heat_capacity_source: str | None = None
    mean_conductivity_per_layer_W_m_K: tuple | None = None
    mean_heat_capacity_per_layer_J_m3_K: tuple | None = None
    assumptions: str | None = None
    present: frozenset | None = None   # the keys the ledger had (None: those the writer gives)
    extra: Mapping = field(default_factory=dict)

    KEYS = ("horizons_days", "remaining_fraction", "not_estimated", "remaining_change_per_layer_K", "columns",
            "columns_left_out", "conductivity_source", "heat_capacity_source", "mean_conductivity_per_layer_W_m_K",
            "mean_heat_capacity_per_layer_J_m3_K", "assumptions")
    _LISTS = ("horizons_days", "remaining_fraction", "mean_conductivity_per_layer_W_m_K",
              "mean_heat_capacity_per_layer_J_m3_K")

    @classmethod
    def from_dict(cls, d: Mapping) -> "Persistence":
        vals = {k: (_tuple(d.get(k)) if k in cls._LISTS else d.get(k)) for k in cls.KEYS}
        rows = d.get("remaining_change_per_layer_K")
        vals["remaining_change_per_layer_K"] = None if rows is None else tuple(tuple(r) for r in rows)
        return cls(**vals, present=frozenset(k for k in cls.KEYS if k in d), extra=_extra(d, cls.KEYS))

    def to_dict(self) -> dict:
        keys = self.present
        if keys is None:   # as engine/persistence.Accumulator.finish writes them
            keys = self.KEYS[:3] if self.not_estimated is not None else set(self.KEYS) - {"not_estimated"}
        out: dict = {}
        for k in self.KEYS:
            if k in keys:
                v = getattr(self, k)
                out[k] = ([list(r) for r in v] if k == "remaining_change_per_layer_K" and v is not None
                          else _list(v) if k in self._LISTS else v)
        out.update(self.extra)
        return out

    @property
    def estimated(self) -> bool:
        return bool(self.horizons_days) and self.remaining_fraction is not None


_TOP = ("grid", "region", "blocks", "variables", "clamps", "flags", "physics", "member_factors",
        "cells_not_in_phase_equilibrium_before", "layers", "persistence", "notes", "input_phase_disequilibrium",
        "water", "data_blocks_read")


@dataclass(frozen=True)
class LedgerView:
    """What one run changed, read from the ledger dict (see the module docstring).

    Parameters
    ----------
    grid, region : Grid, Region
    blocks : tuple of Block
    variables : dict of str to Variable
        In the ledger's order.
    clamps, flags : dict of str to int
        Cells per rule.
    physics : Physics
    member_factors : MemberFactors or None
    cells_not_in_phase_equilibrium_before : int or None
    layers : LayerBounds or None
    persistence : Persistence or None
    notes : dict of str to str
    input_phase_disequilibrium : Disequilibrium or None
    water : mapping or None
        How the soil water was read (``io.water.WaterSpec.record``).
    data_blocks_read : int or None
    extra : mapping
        Keys this version does not know, kept for :meth:`to_dict`.
    """

    grid: Grid = field(default_factory=Grid)
    region: Region = field(default_factory=Region)
    blocks: tuple[Block, ...] = ()
    variables: Mapping[str, Variable] = field(default_factory=dict)
    clamps: Mapping[str, int] = field(default_factory=dict)
    flags: Mapping[str, int] = field(default_factory=dict)
    physics: Physics = field(default_factory=Physics)
    member_factors: MemberFactors | None = None
    cells_not_in_phase_equilibrium_before: int | None = None
    layers: LayerBounds | None = None
    persistence: Persistence | None = None
    notes: Mapping[str, str] = field(default_factory=dict)
    input_phase_disequilibrium: Disequilibrium | None = None
    water: Mapping | None = None
    data_blocks_read: int | None = None
    extra: Mapping = field(default_factory=dict)

    @classmethod
    def from_dict(cls, d: Mapping) -> "LedgerView":
        """Read a ledger dict: this version's, or an earlier one's (missing keys -> None or empty).

        Parameters
        ----------
        d : mapping
            The ledger (``api.preview``'s result, or ``record["ledger"]`` of a provenance record).

        Returns
        -------
        LedgerView
        """
        if isinstance(d, LedgerView):
            return d
        d = d or {}
        pick = lambda k, make: None if d.get(k) is None else make(d[k])  # noqa: E731
        return cls(
            grid=Grid.from_dict(d.get("grid")), region=Region.from_dict(d.get("region")),
            blocks=tuple(Block.from_dict(b) for b in d.get("blocks") or ()),
            variables={n: Variable.from_dict(n, v) for n, v in (d.get("variables") or {}).items()},
            clamps=dict(d.get("clamps") or {}), flags=dict(d.get("flags") or {}),
            physics=Physics.from_dict(d.get("physics")),
            member_factors=pick("member_factors", MemberFactors.from_dict),
            cells_not_in_phase_equilibrium_before=d.get("cells_not_in_phase_equilibrium_before"),
            layers=pick("layers", LayerBounds.from_dict), persistence=pick("persistence", Persistence.from_dict),
            notes=dict(d.get("notes") or {}),
            input_phase_disequilibrium=pick("input_phase_disequilibrium", Disequilibrium.from_dict),
            water=d.get("water"), data_blocks_read=d.get("data_blocks_read"),
            extra=_extra(d, _TOP))

    def to_dict(self) -> dict:
        """The ledger dict: for a ledger of this version exactly the dict it was read from (the
        same keys, values and key order, so the same JSON).

        Returns
        -------
        dict
        """
        parts = {
            "grid": self.grid.to_dict(), "region": self.region.to_dict(),
            "blocks": [b.to_dict() for b in self.blocks],
            "variables": {n: v.to_dict() for n, v in self.variables.items()},
            "clamps": dict(self.clamps), "flags": dict(self.flags), "physics": self.physics.to_dict(),
            "member_factors": None if self.member_factors is None else self.member_factors.to_dict(),
            "cells_not_in_phase_equilibrium_before": self.cells_not_in_phase_equilibrium_before,
            "layers": None if self.layers is None else self.layers.to_dict(),
            "persistence": None if self.persistence is None else self.persistence.to_dict(),
            "notes": dict(self.notes),
            "input_phase_disequilibrium": None if self.input_phase_disequilibrium is None
            else self.input_phase_disequilibrium.to_dict(),
            "water": None if self.water is None else dict(self.water),
            "data_blocks_read": self.data_blocks_read,
        }
        # a section the run did not make is left out, as the ledger leaves it out
        out = {k: v for k, v in parts.items() if v is not None and (k != "notes" or v)}
        out.update(self.extra)
        return out

    def of_role(self, role: str) -> list[Variable]:
        """The variables of one role, in the ledger's order."""
        return [v for v in self.variables.values() if v.role == role]

    @property
    def soil_node_depths(self) -> list | None:
        """The soil temperature's node depths per layer (the last layered soil-temperature
        variable's), None when the ledger has none."""
        depths = None
        for var in self.of_role("soil_temperature"):
            if var.layered and var.rows:
                depths = var.node_depths
        return depths


__all__ = ["LedgerView", "Grid", "SoilLayer", "Region", "Block", "Variable", "LayerRow", "Physics", "PhaseQuantity",
           "Invariants", "MemberFactors", "LayerBounds", "Disequilibrium", "Persistence", "SOIL_ROLES"]
