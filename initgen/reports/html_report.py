"""One self-contained HTML page per report: tables from the ledger, figures embedded as PNG.

The page loads nothing from elsewhere: no scripts, no external style sheets, fonts or links; the
style is inline and every figure is a ``data:image/png;base64`` URI. It opens offline and can be
attached to an email as one file. Every number on the page is read from the ledger (preview) or
the :func:`initgen.reports.compare.compare` result; this module only formats them.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from initgen.engine.ledger_view import LedgerView
from initgen.engine.persistence import line as persistence_line
from initgen.reports.figures import short_label

STYLE = """
body{font-family:sans-serif;font-size:16px;line-height:1.45;max-width:1080px;margin:1.5em auto;padding:0 1em;color:#111}
h1{font-size:1.6em;margin-bottom:.2em} h2{font-size:1.3em;margin-top:1.6em;border-bottom:1px solid #bbb}
h3{font-size:1.1em;margin-bottom:.3em}
table{border-collapse:collapse;margin:.5em 0 1em 0;font-size:.95em}
th,td{border:1px solid #bbb;padding:.25em .6em;text-align:left;vertical-align:top}
td.n{text-align:right;font-variant-numeric:tabular-nums} th{background:#eee}
code,.hash{font-family:monospace;font-size:.92em;word-break:break-all}
figure{margin:1em 0} figure img{max-width:100%;height:auto;border:1px solid #ddd}
figcaption{font-size:.95em;color:#333} .note{color:#333;font-size:.95em}
.placeholder{border:2px dashed #999;padding:.6em 1em;color:#444;background:#fafafa}
.ok{color:#070;font-weight:bold} .bad{color:#a00;font-weight:bold}
"""

#: What each clamp rule of the ledger means (one sentence each).
CLAMP_TEXT = {
    "soil_temperature_below_min": "the new soil temperature was below physics.soil_temperature_min_K and was set "
                                  "to that limit",
    "soil_temperature_above_max": "the new soil temperature was above physics.soil_temperature_max_K and was set "
                                  "to that limit",
    "snow_temperature_above_freezing": "the new snow temperature was above 273.15 K and was set to 273.15 K "
                                       "(snow cannot be warmer than melting)",
    "skin_temperature_above_freezing_under_snow": "the new skin temperature under snow was above 273.15 K and was "
                                                  "set to 273.15 K",
    "snow_mass_negative": "the new snow mass would have been negative and was set to 0",
    "soil_liquid_rounding_negative_to_zero": "liquid water content a rounding error below 0 was set to 0",
    "soil_ice_rounding_negative_to_zero": "ice content a rounding error below 0 was set to 0",
}

#: What each flag of the ledger means (cells initgen left as they were, or worth a look).
FLAG_TEXT = {
    "temperature_mode_latent_heat_beyond_imposed_energy": "temperature mode set the new temperature exactly, and "
                                                          "the water that changed phase on the way (all ice melts "
                                                          "above 0 C) took more latent heat than the imposed change's "
                                                          "sensible heat; energy mode would give a smaller change",
    "snow_layers_melting": "energy mode: snow warmed past 0 C melted instead of warming further (the energy above "
                           "0 C paid the latent heat; the snow mass went down by the melt)",
    "water_above_porosity_kept": "the layer held more water than its pores before the change; initgen kept it "
                                 "(removing water would break the water budget)",
    "phase_change_against_imposed_change": "water froze while the soil warmed, or ice melted while it cooled: "
                                           "the start was not in phase equilibrium for the soil parameters used",
    "realised_change_opposite_to_imposed": "the soil temperature moved against the imposed change: water froze "
                                           "or melted on its own, so check the physics section against your model",
    "realised_change_larger_than_imposed": "the soil temperature moved by more than the imposed change (beyond "
                                           "0.05 K): latent heat can only damp a change, so the start was not in "
                                           "phase equilibrium",
    "donor_blend_re_equilibrated": "the blend with the donor file was brought into phase equilibrium at its "
                                   "blended temperature, and water froze or melted doing so",
}

MEAN_REGION = ("mean over region: the area-weighted mean change over the region's valid cells (weight > 0), "
               "by land area (cell area x land fraction), cells that did not change counted as 0")
MEAN_CHANGED = "mean over changed cells: the area-weighted mean change over the cells whose value changed"


def esc(x) -> str:
    return html.escape("" if x is None else str(x), quote=True)


def num(v, spec: str = ".4g") -> str:
    return "-" if v is None else format(v, spec)


def table(header: list, rows: list, numeric: set | None = None) -> str:
    """An HTML table; columns whose index is in ``numeric`` are right-aligned."""
    numeric = numeric or set()
    out = ["<table><thead><tr>" + "".join(f"<th>{esc(h)}</th>" for h in header) + "</tr></thead><tbody>"]
    for r in rows:
        out.append("<tr>" + "".join(f'<td class="n">{esc(c)}</td>' if i in numeric else f"<td>{esc(c)}</td>"
                                    for i, c in enumerate(r)) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out)


def figure(png: bytes, caption: str) -> str:
    data = base64.b64encode(png).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{esc(caption)}">'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def page(title: str, body: list[str]) -> str:
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc(title)}</title><style>{STYLE}</style></head><body>\n"
            + "\n".join(body) + "\n</body></html>\n")


def _head_table(head: list) -> str:
    cells = []
    for k, v in head:
        cls = ' class="hash"' if "sha256" in k else ""
        cells.append(f"<tr><th>{esc(k)}</th><td{cls}>{esc(v)}</td></tr>")
    return '<table class="what"><tbody>' + "".join(cells) + "</tbody></table>"


def _rules(counts: dict, texts: dict, none: str) -> str:
    if not counts:
        return f"<p>{esc(none)}</p>"
    rows = [[k, v, texts.get(k, "see README.md, section 'The physics and its sources'")] for k, v in counts.items()]
    return table(["rule", "cells", "what it means"], rows, {1})


def persistence_section(ledger) -> list[str]:
    """The persistence estimate when the ledger (dict or :class:`LedgerView`) has one; else a clearly
    marked empty place."""
    out = ['<h2 id="persistence">Persistence estimate</h2>']
    est = LedgerView.from_dict(ledger).persistence
    if est is None:
        out.append('<p class="placeholder">PERSISTENCE ESTIMATE: not in this ledger (no "persistence" key); '
                   "it will be shown here when initgen computes one.</p>")
        return out
    given = est.to_dict()
    if est.estimated:
        out.append(f"<p>{esc(persistence_line(given))}.</p>")  # the one wording of the estimate
        per_layer = est.remaining_change_per_layer_K or []
        nl = max((len(r) for r in per_layer), default=0)
        head = ["after (days)", "heat anomaly left"] + [f"layer {i} change left (K)" for i in range(nl)]
        rows = []
        for i, (h, f) in enumerate(zip(est.horizons_days, est.remaining_fraction)):
            layer = per_layer[i] if i < len(per_layer) else []
            rows.append([num(h), f"{f * 100:.0f} %"] + [num(v) if v is not None else "-" for v in layer])
        out.append(table(head, rows))
        src = [f"{k.replace('_', ' ')}: {given[k]}" for k in ("heat_capacity_source", "conductivity_source")
               if k in given]
        if src:
            out.append(f"<p>{esc('; '.join(src))}.</p>")
        if est.assumptions:
            out.append(f"<p><em>Assumptions:</em> {esc(est.assumptions)}</p>")
        return out
    if "not_estimated" in given:
        out.append(f"<p>{esc(persistence_line(given))}.</p>")
        return out
    rows = []   # a form of the estimate this version does not know: every quantity it holds
    for k, v in given.items():
        if isinstance(v, float):
            v = num(v)
        elif isinstance(v, (list, tuple)):
            v = ", ".join(num(x) if isinstance(x, float) else str(x) for x in v)
        elif isinstance(v, dict):
            v = "; ".join(f"{a}: {num(b) if isinstance(b, float) else b}" for a, b in v.items())
        rows.append([k, v])
    out.append(table(["quantity", "value"], rows))
    return out


def _ledger_tables(ledger: LedgerView) -> list[str]:
    out = []
    reg = ledger.region
    out.append(f"<p>Region: {reg.cells_weight_above_0} cells with weight &gt; 0 ({reg.cells_full_weight} at "
               f"full weight), " + (f"{esc(reg.area_is or 'area')} {reg.area_m2 / 1e6:,.0f} km2.</p>"
                                    if reg.area_m2 is not None else
                                    f"area {esc(reg.area_is or 'not known')}: means use equal weights and "
                                    "totals in kg and J are left out.</p>"))
    for name, var in ledger.variables.items():
        parts = name.split("+")
        out.append(f"<h3>{esc(short_label(name))} ({esc(var.role)}, change in {esc(var.units)})</h3>")
        rows = var.rows
        per_layer = len(parts) == len(rows) and len(parts) > 1  # one variable per layer: name each in the table
        body = []
        for r in rows:
            body.append([r.layer] + ([parts[r.layer]] if per_layer else [])
                        + [num(r.node_depth_m, ".3f"), "-" if r.cells_in_region is None else r.cells_in_region,
                           r.cells_changed, num(r.area_weighted_mean), num(r.min), num(r.max)])
        k = 1 if per_layer else 0
        out.append(table(["layer"] + (["variable"] if per_layer else []) + ["node depth (m)", "cells in region",
                                                                           "cells changed", "mean over region",
                                                                           "min", "max"],
                         body, {0} | {i + k for i in range(1, 7)}))
    out.append(f'<p class="note">{esc(MEAN_REGION)}; min and max over the same cells.</p>')
    return out


def _physics_tables(ledger: LedgerView) -> list[str]:
    phys = ledger.physics
    rule = (f", phase rule <code>{esc(phys.phase_rule)}</code> ("
            + ("water changes phase only where the imposed change requires it"
               if phys.phase_rule == "change_driven" else
               "the liquid/ice split is put on the freezing curve, as a model that diagnoses it would") + ")"
            if phys.phase_rule else "")
    out = [f"<p>Mode: <code>{esc(phys.mode)}</code>{rule}.</p>"]
    if phys.soil_parameters:
        out.append(table(["soil parameter", "from"], [[k.replace("_", " "), v]
                                                      for k, v in phys.soil_parameters.items()]))
    inv = phys.invariants
    if inv is not None and inv.to_dict():
        out.append("<p>Invariants, measured on the changed layer-cells (the physics' promises; a non-zero "
                   "count of cells is a defect to report):</p>")
        out.append(table(["invariant", "measured"], [[k.replace("_", " "), num(v) if isinstance(v, float) else v]
                                                     for k, v in inv.counts()], {1}))
    shift = ledger.input_phase_disequilibrium
    if shift is not None and shift.cells:
        out.append(f"<p>Input off the freezing curve of the soil parameters used: {esc(shift.meaning)}.</p>")
        rows = [[i, c, num(f), num(m)] for i, (c, f, m) in enumerate(zip(
            shift.cells_per_layer, shift.would_freeze_kg_per_layer, shift.would_melt_kg_per_layer))]
        out.append(table(["layer", "cells", "equilibrium rule would freeze (kg)", "would melt (kg)"], rows,
                         {0, 1, 2, 3}))
    if ledger.notes:
        out.append(table(["what initgen inferred", "how"], [[k.replace("_", " "), v]
                                                            for k, v in ledger.notes.items()]))
    totals, per_layer, snow = phys.totals, phys.per_layer(), phys.per_layer(snow=True)
    depths = ledger.soil_node_depths
    if snow:   # per snow layer, not per soil layer
        out.append(table(["snow layer"] + [k for k, _ in snow],
                         [[i] + [num(v[i]) if i < len(v) else "-" for _, v in snow]
                          for i in range(max(len(v) for _, v in snow))], set(range(len(snow) + 1))))
    if totals:
        out.append(table(["quantity (region total)", "value"], [[k, num(v)] for k, v in totals], {1}))
    if per_layer:
        n = max(len(v) for _, v in per_layer)
        rows = [[i, num(depths[i], ".3f") if depths and i < len(depths) else "-"]
                + [num(v[i]) if i < len(v) else "-" for _, v in per_layer] for i in range(n)]
        out.append("<p>Per layer, per m2 of region:</p>")
        out.append(table(["layer", "node depth (m)"] + [k for k, _ in per_layer], rows, set(range(n + 2))))
    if ledger.cells_not_in_phase_equilibrium_before:
        out.append(f"<p>{ledger.cells_not_in_phase_equilibrium_before} region layer-cells were not in phase "
                   "equilibrium before the change.</p>")
    return out


def preview_page(*, rec, lay, input, input_sha256: str, grid, ledger, member: dict | None,
                 blocks: list, figures: list, sentences: list, caution: str, version: str) -> str:
    """The preview report page.

    ``ledger``: a dict or :class:`LedgerView`; ``blocks``: rows of the perturbation-block table;
    ``figures``: (png bytes, caption); ``sentences``: plain sentences for single-valued layers (shown
    instead of a histogram bar).
    """
    ledger = LedgerView.from_dict(ledger)
    title = f"initgen preview: {rec.name}" + (f", member {member['name']}" if member else "")
    B = [f"<h1>{esc(title)}</h1>"]
    if rec.data.get("description"):
        B.append(f"<p><em>{esc(rec.data['description'])}</em></p>")
    head = [["recipe", f"{rec.name}" + (f" ({rec.path.name})" if rec.path else "")],
            ["recipe sha256 (canonical)", rec.sha256],
            ["input", str(Path(input).resolve())],
            ["input sha256", input_sha256],
            ["member", "none (the recipe as written)" if not member else
             f"{member['name']}: scale {member['scale']:g}, sign {member['sign']:+d}, offset {member['offset_K']:g} K"
             + (f", noise sigma {member['noise']['sigma_K']:g} K over {member['noise']['length_km']:g} km, "
                f"seed {member['seed']}" if member.get("noise") else "")],
            ["layout", f"{lay.name}, sha256 {lay.sha256}" if lay is not None else "none (roles from CF attributes)"],
            ["grid", f"{grid.kind} {' x '.join(map(str, grid.shape))} on ({', '.join(grid.dims)}), {grid.extent()}; "
                     f"cell area {grid.area_source}"],
            ["initgen", f"{version}; a dry run: no netCDF file was written"]]
    B.append(_head_table(head))
    B.append("<h2>Perturbation blocks</h2>")
    B.append(table(["block", "targets", "cells w>0", "taper", "anomaly K", "surface factor", "layer factors"], blocks,
                   {2}))
    B.append("<h2>What would change (the ledger)</h2>")
    B += _ledger_tables(ledger)
    B.append("<h2>Clamps</h2>")
    B.append(_rules(ledger.clamps, CLAMP_TEXT, "No value was clamped."))
    B.append("<h2>Flags</h2>")
    B.append(_rules(ledger.flags, FLAG_TEXT, "No cell was flagged."))
    B.append("<h2>Physics: energy and phase change</h2>")
    B += _physics_tables(ledger)
    B += persistence_section(ledger)
    B.append("<h2>Figures</h2>")
    for png, caption in figures:
        B.append(figure(png, caption))
    if sentences:
        B.append("<h3>Layers with a single value of change</h3><ul>"
                 + "".join(f"<li>{esc(s)}</li>" for s in sentences) + "</ul>")
    B.append(f"<h2>Caution</h2><p>{esc(caution)}</p>")
    return page(title, B)


def compare_page(result: dict, sha_a: str, sha_b: str, figures: list, version: str) -> str:
    """The compare report page: the verdict, the hashes, per variable and layer what changed."""
    verdict = "OK" if result["ok"] else "DIFFERENT"
    title = f"initgen compare: {verdict}"
    B = [f"<h1>initgen compare: <span class=\"{'ok' if result['ok'] else 'bad'}\">{verdict}</span></h1>"]
    head = [["a", result["a"]], ["a sha256", sha_a], ["a format", result["format"]["a"]["data_model"]],
            ["b", result["b"]], ["b sha256", sha_b], ["b format", result["format"]["b"]["data_model"]],
            ["allowed to differ", (", ".join(result["allow"]) or "nothing") + " (and the global history attribute)"],
            ["initgen", version]]
    B.append(_head_table(head))
    if result["identical"]:
        B.append("<p>The files are identical.</p>")
    if result["differences"]:
        B.append("<h2>Differences outside the allowed variables</h2><ul>"
                 + "".join(f"<li>{esc(d)}</li>" for d in result["differences"]) + "</ul>")
    changed = {n: v for n, v in result["variables"].items() if v.get("status") != "identical"}
    if changed:
        B.append("<h2>Variables that differ</h2>")
        rows = []
        for name, v in changed.items():
            if "cells" not in v:
                rows.append([name, "yes" if v.get("allowed") else "no", v.get("status"), "-", "-", "-", "-", "-",
                             "-", "-"])
                continue
            box = v.get("bbox")
            rows.append([name, "yes" if v.get("allowed") else "no", "all", v["cells_changed"], v["cells"],
                         num(v["max_abs_change"]), num(v["area_weighted_mean_change"]), v.get("units") or "-",
                         f"{box['lon'][0]:.2f}..{box['lon'][1]:.2f}" if box else "-",
                         f"{box['lat'][0]:.2f}..{box['lat'][1]:.2f}" if box else "-"])
            for r in v.get("layers") or []:
                if r["cells_changed"]:
                    rows.append(["", "", f"{v['layer_dim']}[{r['layer']}]", r["cells_changed"], r["cells"],
                                 num(r["max_abs_change"]), num(r["area_weighted_mean_change"]), "", "", ""])
        B.append(table(["variable", "allowed", "layer", "cells changed", "of", "max |change|",
                        "mean over changed cells", "units", "lon", "lat"], rows, {3, 4, 5, 6}))
        B.append(f'<p class="note">{esc(MEAN_CHANGED)} (weights: cell area from file a, or equal weights when '
                 "it has no grid).</p>")
        struct = [(n, s) for n, v in changed.items() for s in v.get("structure") or []]
        if struct:
            B.append("<h3>Structure</h3>" + table(["variable", "difference"], struct))
    other = [s for s in result["structure"] if not s.startswith("variable '")]
    if other:
        B.append("<h2>File-level differences</h2><ul>" + "".join(f"<li>{esc(s)}</li>" for s in other) + "</ul>")
    same = [n for n, v in result["variables"].items() if v.get("status") == "identical"]
    B.append(f"<p>Identical variables: {len(same)}.</p>")
    if result.get("notes"):
        B.append("<h2>Notes</h2><ul>" + "".join(f"<li>{esc(n)}</li>" for n in result["notes"]) + "</ul>")
    if figures:
        B.append("<h2>Figures</h2>")
        for png, caption in figures:
            B.append(figure(png, caption) if png is not None else f"<p>{esc(caption)}</p>")
    return page(title, B)


__all__ = ["preview_page", "compare_page", "CLAMP_TEXT", "FLAG_TEXT", "MEAN_REGION", "MEAN_CHANGED"]
