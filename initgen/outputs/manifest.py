"""The ensemble's manifest (JSON and CSV) and its text: the dry-run members table and the results table.
"""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

from initgen._version import __version__
from initgen.engine import plan as plan_mod
from initgen.io.atomic import write_atomic_text
from initgen.io.grid import open_model
from initgen.io.stores import NetCDFStore
from initgen.outputs import provenance as prov
from initgen.outputs.members import configure, ledger_summary, select
from initgen.text import value_or_dash

MANIFEST_FORMAT = "initgen-ensemble-manifest/1"


@dataclass
class EnsembleResult:
    manifest: dict
    outdir: Path
    results: list = field(default_factory=list)

    @property
    def failed(self) -> list:
        return [r for r in self.results if r["status"] != "ok"]

    @property
    def exit_code(self) -> int:
        """0 all written; 2 every failure was bad input (of that member); 1 otherwise."""
        bad = self.failed
        if not bad:
            return 0
        return 2 if all(r["exit_code"] == 2 for r in bad) else 1


CSV_COLUMNS = ("member", "scale", "sign", "offset_K", "noise_sigma_K", "noise_length_km", "seed", "input",
               "input_sha256", "output", "output_sha256", "status", "message",
               "top_soil_temperature_change_area_mean_K", "frozen_kg", "melted_kg", "latent_J", "sensible_J",
               "clamped_cells")


def _manifest(recipe, layout, outdir, results, started, workers, scheduler) -> dict:
    outputs = []
    for r in results:
        row = dict(r)
        row.pop("index", None)
        try:
            row["output_relative"] = str(Path(r["output"]).resolve().relative_to(outdir.resolve()))
        except ValueError:
            row["output_relative"] = None
        if not row["detail"]:
            row.pop("detail")
        outputs.append(row)
    return {
        "format": MANIFEST_FORMAT,
        "initgen_version": __version__,
        "recipe": {"name": recipe.name, "path": str(recipe.path) if recipe.path else None, "sha256": recipe.sha256,
                   "seed": recipe.view.seed},
        "layout": None if layout is None else {"name": layout.name, "sha256": layout.sha256},
        "output_folder": str(outdir.resolve()),
        "started_utc": started,
        "ended_utc": prov.utc_now(),
        "execution": {"scheduler": scheduler} if scheduler else {"workers": workers},
        "counts": {"outputs": len(results), "ok": sum(r["status"] == "ok" for r in results),
                   "failed": sum(r["status"] == "failed" for r in results),
                   "not_run": sum(r["status"] == "not run" for r in results),
                   "pending": sum(r["status"] == "pending" for r in results)},
        "outputs": outputs,
    }


def manifest_csv(manifest: dict) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for r in manifest["outputs"]:
        m, s = r["member"], r["summary"] or {}
        noise = m["noise"] or {}
        vals = {"member": m["name"], "scale": m["scale"], "sign": m["sign"], "offset_K": m["offset_K"],
                "noise_sigma_K": noise.get("sigma_K"), "noise_length_km": noise.get("length_km"), "seed": m["seed"],
                "input": r["input"], "input_sha256": r["input_sha256"], "output": r["output"],
                "output_sha256": r["output_sha256"], "status": r["status"], "message": r["message"], **s}
        w.writerow(["" if vals.get(c) is None else vals.get(c) for c in CSV_COLUMNS])
    return buf.getvalue()


def write_manifest(outdir: Path, manifest: dict) -> None:
    write_atomic_text(Path(outdir) / "manifest.json", json.dumps(manifest, indent=2, allow_nan=False) + "\n")
    write_atomic_text(Path(outdir) / "manifest.csv", manifest_csv(manifest))


# ---------------------------------------------------------------------------------------------



def preview(recipe, input_path, layout=None, *, names=None, allow_outside_paths: bool = False) -> list:
    """Each selected member's ledger for one input, without writing: [(Member, ledger), ...]."""
    chosen = select(recipe, names)
    store = NetCDFStore(input_path)
    try:
        model = open_model(store, layout, needed=plan_mod.needed_roles(recipe))
        base = plan_mod.build_plan(recipe, model, allow_outside=allow_outside_paths)
        out = []
        for m in chosen:
            p = configure(plan_mod.Plan(recipe, model, base.blocks, recipe.view.physics, base.region, base.window), m)
            out.append((m, plan_mod.run(p, store, write=False)))
        return out
    finally:
        store.close()


def members_table(rows) -> str:
    """One line per member: name, scale, sign, offset, top-layer mean change over region, frozen, melted, clamps."""
    lines = [f"{'member':<20} {'scale':>6} {'sign':>4} {'offset_K':>8} {'top_dT_K':>9} {'frozen_kg':>10} "
             f"{'melted_kg':>10} {'latent_J':>10} {'clamped':>7}"]
    for m, led in rows:
        s = ledger_summary(led)
        lines.append(f"{m.name:<20} {m.scale:>6.3g} {m.sign:>+4d} {m.offset_K:>8.3g} "
                     f"{value_or_dash(s['top_soil_temperature_change_area_mean_K'], '9.4g')} "
                     f"{value_or_dash(s['frozen_kg'], '10.4g')} {value_or_dash(s['melted_kg'], '10.4g')} {value_or_dash(s['latent_J'], '10.4g')} "
                     f"{s['clamped_cells']:>7d}")
    lines.append("(top_dT_K: mean over region of the top soil layer's change, area-weighted as in the ledger; "
                 "frozen, melted and latent: region totals; clamped: cells a limit changed)")
    return "\n".join(lines)


def results_table(result: EnsembleResult) -> str:
    """One line per output: member, input, status, mean top-layer change (or the failure)."""
    lines = [f"{'member':<20} {'input':<24} {'status':<7} {'top_dT_K':>9}  output / message"]
    for r in result.results:
        s = r["summary"] or {}
        tail = r["output"] if r["status"] == "ok" else r["message"]
        if r["status"] == "ok" and r["message"].startswith("kept"):
            tail += " (kept: written earlier, matches its record)"
        lines.append(f"{r['member']['name']:<20} {Path(r['input']).name:<24} {r['status']:<7} "
                     f"{value_or_dash(s.get('top_soil_temperature_change_area_mean_K'), '9.4g')}  {tail}")
    c = result.manifest["counts"]
    kept = sum(1 for r in result.results if r["status"] == "ok" and r["message"].startswith("kept"))
    lines.append(f"{c['ok']} of {c['outputs']} output(s) written" + (f" ({kept} kept from an earlier run)" if kept
                 else "") + f", {c['failed']} failed" + (f", {c['not_run']} not run" if c.get("not_run") else "")
                 + "; manifest: "
                 f"{result.outdir / 'manifest.json'} and manifest.csv")
    return "\n".join(lines)
