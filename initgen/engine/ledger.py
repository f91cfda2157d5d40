"""The ledger: one record of what a run changed, read by preview, provenance and compare.

Per changed variable and layer: cells changed, min / mean / max change and the area-weighted
mean change over the region's valid cells; clamps by rule; water frozen and melted (kg m-2 as an
area-weighted mean, kg as a region total) and sensible and latent energy (J m-2 area-weighted
mean, J region total); cells that were not in phase equilibrium before the change.

:meth:`Ledger.finish` gives these as a :class:`~initgen.engine.ledger_view.LedgerView`, the one
definition of the ledger's shape; its ``to_dict()`` is what a provenance record stores.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from initgen.engine.ledger_view import (SOIL_ROLES, Block, Disequilibrium, Grid, Invariants, LayerBounds, LayerRow,
                                        LedgerView, MemberFactors, Physics, PhaseQuantity, Region, SoilLayer,
                                        Variable)


class _Stats:
    """Running per-layer statistics of a change field."""

    def __init__(self, nlayers: int):
        n = max(nlayers, 1)
        self.count = np.zeros(n, np.int64)
        self.region = np.zeros(n, np.int64)
        self.sum = np.zeros(n)
        self.min = np.full(n, np.inf)
        self.max = np.full(n, -np.inf)
        self.asum = np.zeros(n)
        self.area = np.zeros(n)

    def add(self, change: np.ndarray, inside: np.ndarray, area: np.ndarray) -> None:
        """change, inside: (E, L, *h) or (E, *h); area: (*h)."""
        if change.ndim == area.ndim + 1:
            change, inside = change[:, None], inside[:, None]
        nl = change.shape[1]
        for layer in range(nl):
            c = change[:, layer]
            m = inside[:, layer] & np.isfinite(c)
            if not np.any(m):
                continue
            a = np.broadcast_to(area, c.shape)[m]
            v = c[m]
            self.region[layer] += v.size
            self.count[layer] += int(np.count_nonzero(v != 0))
            self.sum[layer] += float(v.sum())
            self.min[layer] = min(self.min[layer], float(v.min()))
            self.max[layer] = max(self.max[layer], float(v.max()))
            self.asum[layer] += float((v * a).sum())
            self.area[layer] += float(a.sum())

    def rows(self, depths=None) -> list[LayerRow]:
        out = []
        for i in range(self.count.size):
            n = int(self.region[i])
            out.append(LayerRow(
                layer=i,
                cells_in_region=n,
                cells_changed=int(self.count[i]),
                min=_num(self.min[i]) if n else None,
                mean=_num(self.sum[i] / n) if n else None,
                max=_num(self.max[i]) if n else None,
                area_weighted_mean=_num(self.asum[i] / self.area[i]) if self.area[i] > 0 else None,
                node_depth_m=_num(depths[i]) if depths is not None and i < len(depths) else None))
        return out


def _num(x) -> float:
    return float(np.round(float(x), 12))


def _num_or_none(x) -> float | None:
    """A depth as the ledger gives it: None where the file gives none (not finite)."""
    return _num(x) if np.isfinite(x) else None


class Ledger:
    def __init__(self, plan):
        self.plan = plan
        self.vars: dict = {}
        self.clamps: Counter = Counter()
        self.flags: Counter = Counter()
        self.phase = {}
        self.input_shift = {}     # per layer: cells and kg the equilibrium rule would move in the input
        self.soil_sources = None  # where the soil parameters came from (set by the plan's run)
        self.invariants = Counter()   # the physics' promises, measured on the cells it changed
        self.notes = {}               # how initgen read something it had to infer, in words
        self.nlayers = {}
        self.persistence = None  # persistence.Accumulator, set by the first soil block

    def stats(self, name: str, role: str, units: str, nlayers: int, layered: bool) -> _Stats:
        if name not in self.vars:
            self.vars[name] = {"role": role, "units": units, "layered": layered, "stats": _Stats(nlayers)}
        return self.vars[name]["stats"]

    def clamp(self, rule: str, count: int) -> None:
        """Cells whose new value a limit changed, by rule."""
        if count:
            self.clamps[rule] += int(count)

    def flag(self, rule: str, count: int) -> None:
        """Cells worth a modeller's attention that initgen left as they were, by rule."""
        if count:
            self.flags[rule] += int(count)

    def add_phase(self, key: str, per_layer: np.ndarray, total: float | None = None) -> None:
        """Accumulate area-integrated per-layer quantities (already multiplied by area)."""
        cur = self.phase.setdefault(key, np.zeros_like(per_layer, dtype=float))
        if cur.shape != per_layer.shape:
            cur = np.zeros_like(per_layer, dtype=float)
        self.phase[key] = cur + per_layer

    def _phase_rule(self) -> str:
        rule = self.plan.physics.phase_rule
        if self.plan.model.phase_split_diagnosed:
            self.note("phase_rule", "the file keeps only total soil water, so its model diagnoses the liquid/ice "
                                    f"split from temperature: the equilibrium rule is used (the recipe says {rule})")
            return "equilibrium"
        return rule

    def note(self, key: str, text: str) -> None:
        """Say how something was inferred (the first wording per key is kept)."""
        self.notes.setdefault(key, text)

    def add_input_shift(self, cells: np.ndarray, freeze_kg: np.ndarray, melt_kg: np.ndarray,
                        inconsistent: np.ndarray) -> None:
        """Accumulate, per layer, the input's cells out of phase equilibrium and the kg (area
        integrated) of water the equilibrium rule would freeze and melt in them; and the cells a
        one-sided model would not hold either (liquid above the curve below 0 C, ice above 0 C)."""
        for key, v in (("cells", cells), ("freeze_kg", freeze_kg), ("melt_kg", melt_kg),
                       ("inconsistent", inconsistent)):
            cur = self.input_shift.get(key)
            self.input_shift[key] = v if cur is None or cur.shape != v.shape else cur + v

    def finish(self) -> LedgerView:
        """The ledger as its typed view (``LedgerView.to_dict()`` is the dict a record stores)."""
        model = self.plan.model
        has_area = model.grid.has_area
        region_area = float(self.plan.area[self.plan.region].sum())
        physics = self._physics(region_area, has_area)   # before the notes: the phase rule may add one
        layers = model.layers
        return LedgerView(
            grid=Grid(model.grid.kind, tuple(model.grid.shape), tuple(model.grid.dims), model.grid.area_source,
                      model.source, _layer_geometry(layers)),
            region=Region(
                cells_weight_above_0=int(self.plan.region.sum()),
                cells_full_weight=int(np.any([b.weight >= 1.0 for b in self.plan.blocks], axis=0).sum()),
                # no cell areas could be had: an area in m2 would be a count of cells; say why instead
                area_m2=region_area if has_area else None,
                area_is=(f"not known ({model.grid.area_source})" if not has_area
                         else "land area (cell area x land fraction)" if model.role("land_fraction") is not None
                         else "cell area")),
            blocks=tuple(Block(b.name, tuple(b.targets), int((b.weight > 0).sum()),
                               None if b.factors is None else tuple(_num(f) for f in b.factors),
                               _num(b.surface_factor),
                               None if b.anomaly is None
                               else _anomaly_summary(self.plan.effective_anomaly(b), b.weight))
                         for b in self.plan.blocks),
            variables=self._variables(None if layers is None else layers.node_m.tolist()),
            clamps=dict(sorted(self.clamps.items())),
            flags=dict(sorted(self.flags.items())),
            physics=physics,
            member_factors=MemberFactors(_num(self.plan.member_scale), _num(self.plan.member_offset_K),
                                         self.plan.noise is not None),
            # the input's cells off the freezing curve: the same count as input_phase_disequilibrium
            cells_not_in_phase_equilibrium_before=int(sum(self.input_shift["cells"])) if self.input_shift else 0,
            # layer geometry, so a record can be collated without the model file (None where the
            # file gives no interfaces: nodes only)
            layers=None if layers is None else LayerBounds(tuple(_num_or_none(v) for v in layers.top_m),
                                                           tuple(_num_or_none(v) for v in layers.bottom_m)),
            # persistence.py: idealised conduction bound of the anomaly
            persistence=None if self.persistence is None else self.persistence.finish(),
            notes=dict(sorted(self.notes.items())),
            input_phase_disequilibrium=self._disequilibrium())

    def _variables(self, depths) -> dict[str, Variable]:
        out = {}
        for name, rec in self.vars.items():
            rows = rec["stats"].rows(depths if rec["role"] in SOIL_ROLES else None)
            out[name] = Variable(name, rec["role"], rec["units"], rec["layered"],
                                 tuple(rows) if rec["layered"] else tuple(rows[:1]))
        return out

    def _physics(self, region_area: float, has_area: bool) -> Physics:
        phys = self.plan.physics
        quantities = []
        area = region_area if region_area > 0 else 1.0
        for key, per_layer in self.phase.items():
            unit = "J" if key.endswith("_J") else "kg"
            quantities.append(PhaseQuantity(key[:-len(unit) - 1], unit,
                                             _num(per_layer.sum()) if has_area else None,  # no areas: no totals
                                             tuple(_num(v / area) for v in per_layer)))
        return Physics(mode=phys.mode,
                       phase_rule=self._phase_rule() if phys.active else None,
                       soil_parameters=self.soil_sources if phys.active else None,
                       totals_left_out=None if has_area else f"no cell areas ({self.plan.model.grid.area_source})",
                       invariants=self._invariants(), quantities=tuple(quantities))

    def _invariants(self) -> Invariants | None:
        inv = self.invariants
        if not inv.get("cells_checked"):
            return None
        energy = self.plan.physics.mode == "energy"
        return Invariants(
            cells_checked=int(inv["cells_checked"]),
            water_change_region_kg=_num(inv["water_change_kg"]),
            water_change_relative=float(f"{inv['water_change_kg'] / inv['water_before_kg']:.3g}")
            if inv["water_before_kg"] > 0 else 0.0,
            cells_change_opposite_to_imposed=int(inv["cells_opposite_sign"]),
            cells_made_inconsistent=int(inv["cells_made_inconsistent"]),
            cells_change_beyond_imposed=int(inv["cells_beyond_imposed"]) if energy else None,
            cells_phase_change_beyond_energy=int(inv["cells_phase_change_beyond_energy"]) if energy else None,
            max_energy_budget_rel_error=float(f"{inv['max_energy_budget_rel_error']:.3g}") if energy else None,
            cells_change_not_equal_to_imposed=None if energy else int(inv["cells_not_exact"]),
            meaning=("measured on the changed soil layer-cells before values are stored (storage rounds to "
                     "the file's precision): water (liquid + ice) conserved; the temperature change never "
                     "opposite to the imposed one; "
                     + ("|dT| <= |imposed dT| and the enthalpy change C0 dT dz" if energy
                        else "dT equal to the imposed change")
                     + "; a state consistent with the one-sided rule (no liquid above the freezing "
                       "curve below 0 C, no ice above 0 C) stays so"
                     + ("; the phase change paid by the imposed energy" if energy else "")))

    def _disequilibrium(self) -> Disequilibrium | None:
        s = self.input_shift
        if not s:
            return None
        rule = self._phase_rule()  # the rule the physics applied (equilibrium where the file diagnoses the split)
        return Disequilibrium(
            cells_per_layer=tuple(int(v) for v in s["cells"]),
            would_freeze_kg_per_layer=tuple(_num(v) for v in s["freeze_kg"]),
            would_melt_kg_per_layer=tuple(_num(v) for v in s["melt_kg"]),
            inconsistent_per_layer=tuple(int(v) for v in s["inconsistent"]),
            acted_on=rule == "equilibrium",
            meaning=("region layer-cells of the input whose liquid/ice split is not on the freezing curve of "
                     "the soil parameters used; "
                     + ("the equilibrium rule re-balances them (as a model that diagnoses the split would)"
                        if rule == "equilibrium" else
                        "the change-driven rule leaves them as they are (reported, not acted on)")))


def _layer_geometry(layers) -> tuple[SoilLayer, ...] | None:
    """Per soil layer: top, bottom and node depth (m; None where not known) and where they came from."""
    if layers is None:
        return None
    return tuple(SoilLayer(_num_or_none(t), _num_or_none(b), _num(z), src)
                 for t, b, z, src in zip(layers.top_m, layers.bottom_m, layers.node_m, layers.source))


def _anomaly_summary(anom: np.ndarray, weight: np.ndarray) -> dict:
    inside = weight > 0
    a = anom[inside]
    return {"min": _num(a.min()), "max": _num(a.max()), "mean": _num(a.mean())} if a.size else {}
