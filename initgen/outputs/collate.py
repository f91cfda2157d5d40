"""Collate the provenance records of several groups' submissions side by side.

Reads provenance records (files, folders of them, ensemble manifests), checks each one (its
output file, where present, still has the recorded sha256; every record has the same recipe hash
as the others), and compares what each model received: the realised area-mean change of soil
temperature in common depth bands (from each model's own layers, by thickness-weighted overlap),
the column heat and ice change per m2, clamps, flags and the persistence estimate.

Writes ``collation.csv``, ``collation.json`` and a self-contained ``collation.html`` (figures as
embedded PNG, no external links or scripts). Everything is computed before the first byte is
written, and each file is written through a temporary and a rename, so a failure leaves nothing
half-written.

Exit status (``initgen collate``): 0 when every record shares one recipe hash and passes its
checks; 3 when any differs (each named, with how); 2 for bad input (a file that is not a
provenance record, a missing path, a bad option): then nothing is written.
"""

from __future__ import annotations

import base64
import csv
import html
import io
import json
from collections import Counter
from pathlib import Path

import numpy as np

from initgen.engine.ledger_view import LedgerView
from initgen.errors import InputError
from initgen.io.atomic import sha256_file, write_atomic_text
from initgen.io.targets import need_folder
from initgen.outputs import provenance as prov

BANDS_CM = ((0, 10), (10, 40), (40, 100), (100, 200))
DEFAULT_THRESHOLD = 0.25
RECORD_SUFFIX = ".provenance.json"
FILES = ("collation.csv", "collation.json", "collation.html")  # what collate writes into its folder


# ---------------------------------------------------------------------------------------------
# Depth bands
# ---------------------------------------------------------------------------------------------


def band_means(top_m, bottom_m, values, bands_cm=BANDS_CM) -> list[dict]:
    """Thickness-weighted mean of per-layer values over depth bands.

    For a band [a, b) the weight of layer i is its overlap ``max(0, min(bottom_i, b) -
    max(top_i, a))``; the band mean is sum(w_i v_i) / sum(w_i) over layers with a value. A band
    that no layer reaches (sum of weights 0) is empty (None), not zero; ``coverage`` is the
    fraction of the band's thickness the layers with values cover.
    """
    top, bot = np.asarray(top_m, float), np.asarray(bottom_m, float)
    vals = np.array([np.nan if v is None else float(v) for v in values], float)
    out = []
    for a_cm, b_cm in bands_cm:
        a, b = a_cm / 100.0, b_cm / 100.0
        w = np.clip(np.minimum(bot, b) - np.maximum(top, a), 0.0, None)
        w = np.where(np.isfinite(vals), w, 0.0)
        total = float(w.sum())
        mean = float((w * np.nan_to_num(vals)).sum() / total) if total > 0 else None
        out.append({"band_cm": [a_cm, b_cm], "mean": mean, "coverage": round(total / (b - a), 6)})
    return out


# ---------------------------------------------------------------------------------------------
# Finding and reading records
# ---------------------------------------------------------------------------------------------


def _records_in(path: Path) -> list[Path]:
    """Record files named by one argument: a record, a manifest, or a folder of either."""
    if not path.exists():
        raise InputError(f"{path}: not found; give provenance records ({RECORD_SUFFIX}), ensemble manifests or "
                         "folders of them")
    if path.is_dir():
        found = sorted(path.rglob("*" + RECORD_SUFFIX))
        for man in sorted(path.rglob("manifest.json")):
            found += _from_manifest(man)
        if not found:
            raise InputError(f"{path}: folder holds no provenance record ({RECORD_SUFFIX}) or manifest.json")
        return found
    if path.name == "manifest.json":
        return _from_manifest(path)
    return [path]


def _from_manifest(path: Path) -> list[Path]:
    try:
        man = json.loads(path.read_text(encoding="utf-8"))
        outputs = man["outputs"]
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError):
        raise InputError(f"{path}: not an initgen ensemble manifest (no 'outputs' list); give the manifest.json "
                         "written by initgen apply") from None
    out = []
    for r in outputs:
        if isinstance(r, dict) and r.get("status") == "ok" and r.get("output"):
            p = Path(r["output"])
            p = p if p.is_absolute() else path.parent / p
            out.append(Path(str(p) + RECORD_SUFFIX))
    return out


def _parse_labels(labels) -> dict:
    out = {}
    for item in labels or ():
        name, sep, rec = str(item).partition("=")
        if not sep or not name.strip() or not rec.strip():
            raise InputError(f"--label {item}: give NAME=RECORD (a label, '=', and a provenance record)")
        key = Path(rec.strip()).resolve()
        if key in out:
            raise InputError(f"--label {item}: {rec.strip()} is labelled twice")
        if name.strip() in out.values():
            raise InputError(f"--label {item}: label '{name.strip()}' is used twice; labels must be unique")
        out[key] = name.strip()
    return out


def _output_beside(record_path: Path, rec: dict) -> Path | None:
    """The output file: beside the record when it is there (a copied folder), else the recorded path."""
    name = record_path.name
    if name.endswith(RECORD_SUFFIX):
        beside = record_path.with_name(name[: -len(RECORD_SUFFIX)])
        if beside.is_file():
            return beside
    recorded = Path((rec.get("output") or {}).get("path") or "")
    return recorded if str(recorded) and recorded.is_file() else None


def _summary(record_path: Path, rec: dict, label: str) -> dict:
    led = LedgerView.from_dict(rec.get("ledger") or {})
    issues = []
    out_path = _output_beside(record_path, rec)
    integrity = "not checked: the output file is not present"
    if out_path is not None:
        if sha256_file(out_path) == (rec.get("output") or {}).get("sha256"):
            integrity = "ok"
        else:
            integrity = "output changed since apply (sha256 differs from the record)"
            issues.append(f"its output {out_path} no longer matches the recorded sha256 (edited or replaced)")
    region = led.region
    area = region.area_m2
    soil = led.of_role("soil_temperature")
    rows = soil[0].rows if soil and soil[0].layered and soil[0].rows else None
    per_layer = None if rows is None else [r.area_weighted_mean for r in rows]
    nodes = None if rows is None else soil[0].node_depths
    if per_layer is not None and led.layers is None:
        issues.append("it holds no layer geometry (made by an initgen that did not record it); re-run apply")
        bands = [{"band_cm": list(b), "mean": None, "coverage": 0.0} for b in BANDS_CM]
    elif per_layer is not None:
        bands = band_means(led.layers.top_m, led.layers.bottom_m, per_layer)
    else:
        bands = [{"band_cm": list(b), "mean": None, "coverage": 0.0} for b in BANDS_CM]
    per_m2 = led.physics.column_per_m2
    sensible, latent = per_m2("sensible"), per_m2("latent")
    frozen, melted = per_m2("frozen"), per_m2("melted")
    pers = led.persistence
    layout = rec.get("layout") or {}
    return {
        "label": label,
        "record": str(record_path),
        "layout": layout.get("name") or "none (roles from CF attributes)",
        "grid_kind": led.grid.kind,
        "recipe_name": (rec.get("recipe") or {}).get("name"),
        "recipe_sha256": (rec.get("recipe") or {}).get("sha256"),
        "member": (rec.get("member") or {}).get("name"),
        "integrity": integrity,
        "region_area_km2": None if area is None else area / 1e6,
        "region_area_is": region.area_is,
        "cell_area": led.grid.cell_area,
        "bands": bands,
        "layer_node_depth_m": nodes,
        "layer_change_K": per_layer,
        "heat_change_J_m2": None if sensible is None else sensible + (latent or 0.0),
        "sensible_J_m2": sensible,
        "latent_J_m2": latent,
        "ice_change_kg_m2": None if frozen is None else frozen - (melted or 0.0),
        "clamps": dict(led.clamps),
        "flags": dict(led.flags),
        "persistence_horizons_days": None if pers is None or pers.horizons_days is None else list(pers.horizons_days),
        "persistence_remaining_fraction": None if pers is None or pers.remaining_fraction is None
        else list(pers.remaining_fraction),
        "issues": issues,
        "band_flags": [],
    }


def collect(paths, labels=None) -> list[dict]:
    """Read every record (refusing anything that is not one) and summarise each; no writing."""
    named = _parse_labels(labels)
    files: list[Path] = []
    for p in list(paths or []) + [k for k in named if k not in {Path(x).resolve() for x in paths or []}]:
        files += _records_in(Path(p))
    seen, unique = set(), []
    for f in files:
        key = f.resolve()
        if key not in seen:
            seen.add(key)
            unique.append(f)
    if not unique:
        raise InputError("collate: no record given; name provenance records, manifests or folders")
    used: Counter = Counter()
    rows = []
    for f in unique:
        rec = prov.load(f)
        if not isinstance(rec.get("ledger"), dict) or not isinstance(rec.get("recipe"), dict):
            raise InputError(f"{f}: provenance record without a ledger or recipe; give a record written by "
                             "initgen apply")
        label = named.get(f.resolve())
        if label is None:
            stem = f.name[: -len(RECORD_SUFFIX)] if f.name.endswith(RECORD_SUFFIX) else f.stem
            base = f"{f.parent.name}/{stem}" if f.parent.name else stem
            used[base] += 1
            label = base if used[base] == 1 else f"{base}#{used[base]}"
        rows.append(_summary(f, rec, label))
    return rows


def compare(rows: list[dict], threshold: float = DEFAULT_THRESHOLD) -> dict:
    """Recipe-hash agreement, integrity and band flags; returns the collation dict."""
    if not (0.0 < float(threshold) < 10.0):
        raise InputError(f"--threshold {threshold}: give a fraction between 0 and 10 (0.25 = 25 %)")
    hashes = Counter(r["recipe_sha256"] for r in rows)
    top = max(hashes.values())
    reference = next(r["recipe_sha256"] for r in rows if hashes[r["recipe_sha256"]] == top)
    for r in rows:
        if r["recipe_sha256"] != reference:
            r["issues"].insert(0, f"recipe '{r['recipe_name']}' sha256 {str(r['recipe_sha256'])[:12]}... differs from "
                                  f"the common recipe sha256 {reference[:12]}...")
    medians = []
    for j, band in enumerate(BANDS_CM):
        vals = [r["bands"][j]["mean"] for r in rows if r["bands"][j]["mean"] is not None]
        med = float(np.median(vals)) if vals else None
        medians.append(med)
        if med is None or len(vals) < 2:
            continue
        for r in rows:
            v = r["bands"][j]["mean"]
            if v is None:
                continue
            dev = abs(v - med) / abs(med) if med != 0 else (np.inf if v != 0 else 0.0)
            if dev > threshold:
                r["band_flags"].append(f"{band[0]}-{band[1]} cm: {v:.3g} K against the median {med:.3g} K "
                                       f"({'inf' if not np.isfinite(dev) else f'{dev * 100:.0f}'} % off)")
    ok = all(not r["issues"] for r in rows)
    return {"format": "initgen-collation/1", "ok": ok, "recipe_sha256": reference,
            "threshold": float(threshold), "bands_cm": [list(b) for b in BANDS_CM], "band_medians_K": medians,
            "submissions": rows}


# ---------------------------------------------------------------------------------------------
# Outputs
# ---------------------------------------------------------------------------------------------

CSV_COLUMNS = ["label", "layout", "grid_kind", "member", "recipe_sha256", "integrity", "region_area_km2", "cell_area"] + \
    [f"dT_{a}_{b}cm_K" for a, b in BANDS_CM] + \
    ["heat_change_J_m2", "ice_change_kg_m2", "clamps", "flags", "persistence", "band_flags", "issues"]


def _cell(v):
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def _counts(d: dict) -> str:
    return "; ".join(f"{k} {v}" for k, v in d.items())


def _persistence_text(r: dict) -> str:
    hz, fr = r["persistence_horizons_days"], r["persistence_remaining_fraction"]
    if not hz or fr is None:
        return ""
    return "; ".join(f"{f * 100:.0f}% at {h:g} d" for h, f in zip(hz, fr))


def _row_values(r: dict) -> list:
    return [r["label"], r["layout"], r["grid_kind"], r["member"], r["recipe_sha256"], r["integrity"],
            r["region_area_km2"], r["cell_area"]] + [b["mean"] for b in r["bands"]] + \
           [r["heat_change_J_m2"], r["ice_change_kg_m2"], _counts(r["clamps"]), _counts(r["flags"]),
            _persistence_text(r), " | ".join(r["band_flags"]), " | ".join(r["issues"])]


def to_csv(col: dict) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r in col["submissions"]:
        w.writerow([_cell(v) for v in _row_values(r)])
    return buf.getvalue()


def _figures(col: dict) -> dict:
    from matplotlib.backends.backend_agg import FigureCanvasAgg  # heavy: matplotlib loads only when drawing
    from matplotlib.figure import Figure

    figs = {}

    def axes(height: float):
        fig = Figure(figsize=(7.5, height), dpi=100)
        FigureCanvasAgg(fig)
        return fig, fig.subplots()

    def lines_done(name: str, fig, ax) -> None:  # a line plot: grid, legend when anything was drawn
        ax.grid(alpha=0.3)
        if ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=8)
        fig.tight_layout()
        figs[name] = fig

    fig, ax = axes(5.0)
    for r in col["submissions"]:
        if r["layer_change_K"] and r["layer_node_depth_m"]:
            pts = [(d * 100, v) for d, v in zip(r["layer_node_depth_m"], r["layer_change_K"])
                   if d is not None and v is not None]
            if pts:
                ax.plot([p[1] for p in pts], [p[0] for p in pts], marker="o", label=r["label"])
    for (a, b), med in zip(BANDS_CM, col["band_medians_K"]):
        if med is not None:
            ax.plot([med, med], [a, b], color="k", lw=3, alpha=0.35)
    ax.invert_yaxis()
    ax.set_xlabel("realised area-mean change of soil temperature (K)")
    ax.set_ylabel("layer node depth (cm)")
    ax.set_title("Realised change against depth (grey bars: band medians)")
    lines_done("profile", fig, ax)
    fig, ax = axes(4.0)
    labels = [r["label"] for r in col["submissions"]]
    heat = [r["heat_change_J_m2"] if r["heat_change_J_m2"] is not None else np.nan for r in col["submissions"]]
    ax.bar(range(len(labels)), [h / 1e6 for h in heat], color="tab:red")
    ax.set_xticks(range(len(labels)))
    ax.set_xticklabels(labels, rotation=20, ha="right", fontsize=8)
    ax.axhline(0, color="k", lw=0.8)
    ax.set_ylabel("column heat change (MJ m-2)")
    ax.set_title("Heat per m2 of region (sensible + latent; empty: no physics mode)")
    fig.tight_layout()
    figs["heat"] = fig
    fig, ax = axes(4.0)
    for r in col["submissions"]:
        if r["persistence_horizons_days"] and r["persistence_remaining_fraction"]:
            ax.plot(r["persistence_horizons_days"], [f * 100 for f in r["persistence_remaining_fraction"]],
                    marker="o", label=r["label"])
    ax.set_xlabel("days after the start")
    ax.set_ylabel("heat anomaly left (%)")
    ax.set_ylim(0, 100)
    ax.set_title("Heat anomaly left: idealised conduction bound")
    lines_done("persistence", fig, ax)
    out = {}
    for name, fig in figs.items():
        buf = io.BytesIO()
        fig.savefig(buf, format="png")
        out[name] = base64.b64encode(buf.getvalue()).decode("ascii")
    return out


def to_html(col: dict) -> str:
    e = html.escape
    figs = _figures(col)
    head = ["label", "layout", "grid", "member", "recipe sha256", "integrity", "region area km2", "cell area"] + \
        [f"dT {a}-{b} cm (K)" for a, b in BANDS_CM] + \
        ["heat MJ m-2", "ice kg m-2", "clamps", "flags", "persistence (heat left)", "band flags", "issues"]
    rows = []
    for r in col["submissions"]:
        vals = _row_values(r)
        vals[4] = (vals[4] or "")[:12] + "..."
        vals[6] = None if vals[6] is None else f"{vals[6]:,.0f}"
        vals[8:12] = [None if v is None else f"{v:.3f}" + ("" if b["coverage"] > 0.999 else
                                                          f" ({b['coverage'] * 100:.0f} % of the band)")
                      for v, b in zip(vals[8:12], r["bands"])]
        vals[12] = None if vals[12] is None else f"{vals[12] / 1e6:.3g}"
        vals[13] = None if vals[13] is None else f"{vals[13]:.3g}"
        cls = ' class="bad"' if r["issues"] else (' class="flag"' if r["band_flags"] else "")
        rows.append(f"<tr{cls}>" + "".join(f"<td>{e(_cell(v)) or '&ndash;'}</td>" for v in vals) + "</tr>")
    status = ("All records share one recipe (sha256 " + e(col["recipe_sha256"]) + ") and pass their checks."
              if col["ok"] else "Some records differ; see the issues column.")
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>initgen collation</title>
<style>body{{font-family:sans-serif;margin:1.5em;max-width:1150px}}table{{border-collapse:collapse;font-size:12px}}
td,th{{border:1px solid #bbb;padding:3px 5px;vertical-align:top}}th{{background:#eee}}tr.bad td{{background:#fdd}}
tr.flag td{{background:#ffd}}img{{max-width:100%;border:1px solid #ddd;margin:0.5em 0}}</style></head><body>
<h1>initgen collation</h1>
<p>{status} Band means are the realised area-mean change of soil temperature, averaged over each depth band by
the thickness-weighted overlap of each model's own layers; an empty cell is a band the model does not reach.
Flagged (yellow): a band mean more than {col['threshold'] * 100:.0f} % from the median of the submissions.
Red: a record that differs from the others or no longer matches its output.</p>
<table><tr>{''.join(f'<th>{e(h)}</th>' for h in head)}</tr>
{chr(10).join(rows)}
</table>
<h2>Realised change against depth</h2>
<img alt="realised change against depth" src="data:image/png;base64,{figs['profile']}">
<h2>Heat per m2</h2>
<img alt="column heat change per m2" src="data:image/png;base64,{figs['heat']}">
<h2>Persistence</h2>
<img alt="heat anomaly left against time" src="data:image/png;base64,{figs['persistence']}">
<p>Persistence: the fraction of the imposed heat anomaly left after each horizon under pure conduction in the
model's own layers with the surface anomaly held at zero and latent heat left out: an idealised bound, not a
forecast of the model.</p>
</body></html>
"""


def problems_text(col: dict) -> list[str]:
    return [f"{r['label']} ({r['record']}): " + "; ".join(r["issues"]) for r in col["submissions"] if r["issues"]]


def collate(paths, out_dir, labels=None, threshold: float = DEFAULT_THRESHOLD) -> dict:
    """Read, check and compare the records; write the three files into ``out_dir``."""
    out_dir = Path(out_dir)
    need_folder(out_dir, f"--out {out_dir}", "give a folder for the collation")
    col = compare(collect(paths, labels), threshold)
    texts = dict(zip(FILES, (to_csv(col), json.dumps(col, indent=2, allow_nan=False) + "\n", to_html(col))))
    out_dir.mkdir(parents=True, exist_ok=True)
    for name, text in texts.items():
        write_atomic_text(out_dir / name, text)
    col["written"] = [str(out_dir / n) for n in texts]
    return col


__all__ = ["band_means", "collect", "compare", "collate", "to_csv", "to_html", "problems_text", "BANDS_CM", "FILES"]
