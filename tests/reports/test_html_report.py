"""The HTML reports of ``preview --report`` and ``compare --report`` (issue 18).

The pages are parsed with the standard library's ``html.parser``; embedded figures are decoded
and checked against the PNG specification (W3C PNG, 2003, sections 5.2 signature and 11.2.2
IHDR: width and height as 4-byte big-endian integers); file hashes against ``hashlib``.
"""

from __future__ import annotations

import base64
import json
import math
import struct
import subprocess
import sys
from contextlib import nullcontext
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from initgen import api
from initgen.reports.preview import _ChangeCapture
from initgen.reports.preview import _imposed_profile
from initgen.reports.compare import compare
from initgen.reports.compare import compare_report
from initgen.reports.preview import preview_report
from initgen.cli import main
from initgen.reports.figures import FIG_PIXELS, short_label
from initgen.config.recipe import load_recipe

from filemaker import add_land_fraction, curvilinear, points, regular
from clikit import sha
from clikit import box_recipe_text
from clikit import recipe as write_recipe
from clikit import ROOT

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # W3C PNG specification (2003), section 5.2

def recipe(folder: Path, w=20, e=80, s=10, n=50, taper=0, placement="outside", profile="uniform") -> Path:
    prof = "kind: uniform" if profile == "uniform" else "kind: exponential, efolding_m: 0.5"
    return write_recipe(folder, box_recipe_text(w, e, s, n, taper_km=taper, placement=placement, profile=prof),
                        "box.yaml")


class Page(HTMLParser):
    """Tags, attributes and text of a page."""

    def __init__(self, text: str):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.headers: list[str] = []
        self._in_th = False
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_th = tag == "th"

    def handle_endtag(self, tag):
        if tag == "th":
            self._in_th = False

    def handle_data(self, data):
        self.text.append(data)
        if self._in_th:
            self.headers.append(data.strip())

    @property
    def plain(self) -> str:
        return " ".join(" ".join(self.text).split())

    def images(self) -> list[bytes]:
        out = []
        for tag, attrs in self.tags:
            if tag == "img":
                src = attrs["src"]
                assert src.startswith("data:image/png;base64,")
                out.append(base64.b64decode(src.split(",", 1)[1], validate=True))
        return out


def png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"  # the first chunk (PNG spec 11.2.2)
    return struct.unpack(">II", data[16:24])


def assert_self_contained(text: str, page: Page) -> None:
    """Nothing is loaded from elsewhere: no scripts, no linked resources, no URLs."""
    for tag, attrs in page.tags:
        assert tag not in ("script", "link", "iframe", "object", "embed", "base"), tag
        for key in ("src", "href", "action", "srcset", "data", "poster"):
            if key in attrs:
                assert attrs[key].startswith("data:") or attrs[key].startswith("#"), (tag, key, attrs[key][:40])
    low = text.lower()
    assert "http:" not in low and "https:" not in low and "@import" not in low and "url(" not in low


def grid_file(tmp_path: Path, kind: str) -> Path:
    """A small file of each grid kind; curvilinear and point grids get a land fraction with some sea."""
    if kind == "regular":
        return regular(tmp_path / "in.nc")
    lon, lat = np.meshgrid(np.linspace(0, 90, 16), np.linspace(-20, 60, 12))
    rot = lon + 0.1 * lat  # a gently skewed grid
    land = (rot < 70).astype(float)  # sea to the east
    if kind == "curvilinear":
        src = curvilinear(tmp_path / "in.nc", rot, lat)
    else:
        src = points(tmp_path / "in.nc", rot.ravel(), lat.ravel())
    return add_land_fraction(src, land)


KINDS = ["regular", "curvilinear", "points"]


# ---------------------------------------------------------------------------------------------
# preview --report
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_preview_page_is_self_contained_with_every_figure_type(tmp_path, kind):
    src = grid_file(tmp_path, kind)
    rec = recipe(tmp_path, taper=500, profile="exponential")
    before = sha(src)
    with pytest.warns(Warning) if kind != "regular" else nullcontext():  # no cell areas: equal weights, warned
        md = preview_report(rec, src, None, tmp_path / "rep")
    assert sha(src) == before
    page_path = md.parent / "report.html"
    text = page_path.read_text()
    page = Page(text)
    assert_self_contained(text, page)
    imgs = page.images()
    captions = [a.get("alt", "") for t, a in page.tags if t == "img"]
    for word in ("Horizontal weight", "Imposed surface anomaly", "Change of tsoil", "Mean change over the region",
                 "Histogram per layer"):
        assert any(c.startswith(word) for c in captions), (word, captions)
    for data in imgs:
        assert png_size(data) == FIG_PIXELS
        assert len(data) > 10_000  # a drawn figure, not an empty canvas
    # the page opens with the recipe and its hash, the input and its hash, then the member
    doc = load_recipe(rec)
    plain = page.plain
    order = [plain.index(x) for x in ("test-box", doc.sha256, str(src.resolve()), sha(src), "member")]
    assert order == sorted(order)
    assert "mean over region" in page.headers
    assert "Persistence estimate" in plain                 # the ledger's estimate, or why there is none
    assert "heat anomaly left" in plain or "persistence: not estimated" in plain
    # every PNG written beside the page is embedded in it, byte for byte
    on_disk = sorted(p.read_bytes() for p in md.parent.glob("*.png"))
    assert sorted(imgs) == on_disk


def test_histogram_area_is_the_spherical_zone_and_single_value_is_a_sentence(tmp_path):
    """A hard-edged box of whole 10-degree cells, all land, uniform -2 K, no physics.

    Every changed cell changes by exactly -2 K (275 K - 2 K stays in one float32 binade), so each
    layer is one sentence; its area is the area of a spherical zone between two meridians,
    A = R^2 (lambda2 - lambda1) (sin phi2 - sin phi1) (Archimedes' hat-box theorem; common
    practice in geodesy) with R = 6371 km.
    """
    src = regular(tmp_path / "in.nc")
    rec = recipe(tmp_path)  # lon 20..80, lat 10..50: cells centred 25..75, 15..45
    preview_report(rec, src, None, tmp_path / "rep")
    text = (tmp_path / "rep" / "report.html").read_text()
    plain = Page(text).plain
    zone_km2 = 6371.0 ** 2 * math.radians(60.0) * (math.sin(math.radians(50)) - math.sin(math.radians(10)))
    sentences = [s for s in plain.split("tsoil layer ")[1:] if "every one of the" in s]
    assert len(sentences) == 5
    for s in sentences:
        assert "every one of the 24 changed cells (ledger) changed by -2 K" in s
        area = float(s.split("K (")[1].split(" km2")[0].replace(",", ""))
        assert area == pytest.approx(zone_km2, rel=1e-3)  # printed with 4 significant digits
    assert not (tmp_path / "rep" / "histogram_soil.png").exists()


@pytest.mark.parametrize("kind", KINDS)
def test_histograms_weigh_by_the_ledgers_area_and_profile_target_is_the_plans(tmp_path, kind):
    """Without physics or limits the realised change is the imposed one, dT = w f(z) A (README).

    The histograms' total area equals the ledger's region area (one area, used twice), and
    the imposed f(z) x A of the profile equals the ledger's mean over region per layer.
    """
    import warnings

    from initgen.engine import plan as plan_mod
    from initgen.io.stores import NetCDFStore

    src = grid_file(tmp_path, kind)
    rec = api.load_recipe(recipe(tmp_path, taper=500, profile="exponential"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        led = api.preview(rec, src)
        store = NetCDFStore(src)
        try:
            model = api._model(store, None, rec)
            plan = plan_mod.build_plan(rec, model)
            cap = _ChangeCapture(store, model, led, plan)
            plan_mod.run(plan, cap, write=True)
        finally:
            store.close()
    rows = led["variables"]["tsoil"]["layers"]
    h = cap.hist["tsoil"]
    # a grid without cell areas has none in the ledger (totals left out); its histograms weigh
    # every cell equally, by the plan's equal weights
    total = led["region"]["area_m2"]
    if total is None:
        assert kind != "regular" and "not known" in led["region"]["area_is"]
        total = float(plan.area[plan.region].sum())
    for i, r in enumerate(rows):
        assert r["cells_changed"] == r["cells_in_region"] == h["cells"][i]
        assert h["area_sum"][i] == pytest.approx(total, rel=1e-12)
        assert h["area"][i].sum() == pytest.approx(total, rel=1e-12)
    imposed = _imposed_profile(plan)
    realised = [r["area_weighted_mean"] for r in rows]
    np.testing.assert_allclose(imposed, realised, atol=1e-4)  # float32 storage of 275 K: 3e-5 K steps
    # exponential profile: f = exp(-z/e) at the layer node (profiles.factor, evaluate: node)
    ratios = np.asarray(realised) / realised[0]
    nodes = np.array([r["node_depth_m"] for r in rows])
    np.testing.assert_allclose(ratios, np.exp(-(nodes - nodes[0]) / 0.5), rtol=1e-3)


def test_preview_of_one_member_names_it_and_the_member_table_splits_scale_and_sign(tmp_path, capsys):
    src = regular(tmp_path / "in.nc")
    p = recipe(tmp_path)
    p.write_text(p.read_text() + "members: {scales: [0.5], signs: [1, -1]}\n")
    assert main(["preview", str(p), "-i", str(src)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].split()[:3] == ["member", "scale", "sign"]
    assert {tuple(line.split()[1:3]) for line in out[1:3]} == {("0.5", "+1"), ("0.5", "-1")}
    names = [line.split()[0] for line in out[1:3]]
    assert main(["preview", str(p), "-i", str(src), "--member", names[1], "--report", str(tmp_path / "r")]) == 0
    page = Page((tmp_path / "r" / "report.html").read_text())
    assert f"member {names[1]}" in page.plain and "scale 0.5, sign -1" in page.plain


def test_persistence_is_shown_when_the_ledger_has_it(tmp_path):
    src = regular(tmp_path / "in.nc")
    rec = recipe(tmp_path)
    led = api.preview(rec, src)
    led["persistence"] = {"e_folding_days": 42.5, "method": "an estimate"}
    preview_report(rec, src, None, tmp_path / "rep", ledger=led)
    plain = Page((tmp_path / "rep" / "report.html").read_text()).plain
    assert "PERSISTENCE ESTIMATE: not in this ledger" not in plain
    assert "e_folding_days 42.5" in plain and "an estimate" in plain


def test_clamps_and_flags_are_explained_in_a_sentence():
    from initgen.reports.html_report import CLAMP_TEXT, FLAG_TEXT

    src = ROOT / "initgen"
    code = "\n".join(p.read_text() for p in src.rglob("*.py"))
    import re

    used_clamps = set(re.findall(r'clamp\("([a-z_]+)"', code))
    used_flags = set(re.findall(r'flag\("([a-z_]+)"', code))
    assert used_clamps and used_flags
    assert used_clamps <= set(CLAMP_TEXT), used_clamps - set(CLAMP_TEXT)
    assert used_flags <= set(FLAG_TEXT), used_flags - set(FLAG_TEXT)
    for key in ("liquid", "ice"):  # the f-string rule soil_{key}_rounding_negative_to_zero
        assert f"soil_{key}_rounding_negative_to_zero" in CLAMP_TEXT


def test_weight_map_shows_sea_grey_and_the_change_map_is_centred_on_zero(tmp_path):
    """A box over the regular file's sea (lon 150..200, |lat| < 20) shows grey sea cells."""
    import matplotlib.image as mpimg

    from initgen.reports.figures import SEA_GREY

    src = regular(tmp_path / "in.nc")
    rec = recipe(tmp_path, w=110, e=160, s=-10, n=30, taper=300)
    preview_report(rec, src, None, tmp_path / "rep")
    img = (mpimg.imread(tmp_path / "rep" / "weights.png")[..., :3] * 255).round().astype(int)
    grey = round(float(SEA_GREY) * 255)
    assert np.count_nonzero(np.all(img == grey, axis=-1)) > 500
    # the colour bar of a change map is symmetric: its darkest red and darkest blue both appear
    img = (mpimg.imread(tmp_path / "rep" / "change_tsoil.png")[..., :3] * 255).round().astype(int)
    from matplotlib import colormaps

    lo, hi = (np.round(np.array(colormaps["RdBu_r"](x)[:3]) * 255).astype(int) for x in (0.0, 1.0))
    assert np.any(np.all(np.abs(img - lo) <= 2, axis=-1)) and np.any(np.all(np.abs(img - hi) <= 2, axis=-1))


# ---------------------------------------------------------------------------------------------
# compare --report
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("kind", KINDS)
def test_compare_page_names_both_hashes_and_embeds_map_and_histogram(tmp_path, kind, capsys):
    import warnings

    src = grid_file(tmp_path, kind)
    out = tmp_path / "out.nc"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        api.apply(recipe(tmp_path, taper=500), src, out)
    # --allow before the two files
    assert main(["compare", "--allow", "tsoil", str(src), str(out), "--report", str(tmp_path / "c")]) == 0
    text = (tmp_path / "c" / "report.html").read_text()
    page = Page(text)
    assert_self_contained(text, page)
    assert sha(src) in page.plain and sha(out) in page.plain
    assert "mean over changed cells" in page.headers and "mean over region" not in page.headers
    imgs = page.images()
    assert len(imgs) == 2  # the map and the histogram of tsoil's first changed layer
    assert all(png_size(d) == FIG_PIXELS for d in imgs)
    result = json.loads(json.dumps(compare(src, out, allow=["tsoil"])))
    row = result["variables"]["tsoil"]["layers"][0]
    assert f"{row['area_weighted_mean_change']:.4g}" in page.plain
    assert (tmp_path / "c" / "compare.md").exists()


def test_compare_page_gives_a_single_valued_change_as_a_sentence(tmp_path):
    src = regular(tmp_path / "in.nc")
    out = tmp_path / "out.nc"
    api.apply(recipe(tmp_path), src, out)  # hard edge, uniform -2 K, no physics: one value of change
    result = compare(src, out, allow=["tsoil"])
    path = compare_report(result, tmp_path / "c")
    page = Page(path.read_text())
    assert len(page.images()) == 1  # the map; the histogram is a sentence
    n = result["variables"]["tsoil"]["layers"][0]["cells_changed"]
    assert n == 24 and f"tsoil lev[0]: every one of the {n} changed cells changed by -2 K." in page.plain


def test_one_definition_per_statistic_where_every_region_cell_changed(tmp_path):
    """Where every region cell changed, mean over region (preview) = mean over changed cells (compare)."""
    src = regular(tmp_path / "in.nc")
    out = tmp_path / "out.nc"
    rec = recipe(tmp_path, taper=500)
    record = api.apply(rec, src, out)
    cmp_ = compare(src, out)
    for r, c in zip(record["ledger"]["variables"]["tsoil"]["layers"], cmp_["variables"]["tsoil"]["layers"]):
        assert r["cells_changed"] == r["cells_in_region"] == c["cells_changed"]
        assert c["area_weighted_mean_change"] == pytest.approx(r["area_weighted_mean"], rel=1e-9)


# ---------------------------------------------------------------------------------------------
# CLI habits and labels
# ---------------------------------------------------------------------------------------------


def test_allow_before_or_after_the_files_and_debug_after_the_command(tmp_path, capsys):
    src = regular(tmp_path / "in.nc")
    out = tmp_path / "out.nc"
    api.apply(recipe(tmp_path), src, out)
    assert main(["compare", "--allow", "tsoil", str(src), str(out)]) == 0
    assert main(["compare", str(src), str(out), "--allow", "tsoil"]) == 0
    assert main(["compare", str(src), "--allow", "tsoil", str(out)]) == 0
    assert main(["compare", "--allow", "other", str(src), str(out)]) == 3
    with pytest.raises(SystemExit) as exc:  # argument errors exit 2 with one line, as argparse's own
        main(["compare", "--allow", "tsoil"])
    assert exc.value.code == 2
    assert capsys.readouterr().err.strip().startswith("initgen: error: compare needs two files")
    assert main(["check", str(tmp_path / "box.yaml"), "--debug"]) == 0
    assert main(["--debug", "check", str(tmp_path / "box.yaml")]) == 0


def test_centered_is_read_as_centred_with_the_same_hash(tmp_path):
    a = load_recipe(recipe(tmp_path, taper=100, placement="centred")).sha256
    b = load_recipe(recipe(tmp_path, taper=100, placement="centered"))
    assert b.data["perturbations"][0]["region"]["taper_placement"] == "centred"
    assert b.sha256 == a
    from initgen.config.recipe import RECIPE as NODE

    assert "centered" in json.dumps(NODE.json())


def test_short_labels_for_per_layer_variable_sets():
    assert short_label("T1+T2+T3+T4") == "T1..4"
    assert short_label("tsoil1+tsoil2+tsoil3+tsoil4+tsoil5") == "tsoil1..5"
    assert short_label("tsoil") == "tsoil"
    assert short_label("top+middle+bottom") == "top+...+bottom (3)"


def test_per_layer_sets_have_short_labels_and_full_names_in_the_table(tmp_path):
    src = regular(tmp_path / "in.nc", per_layer=True)
    lay = tmp_path / "lay.yaml"
    lay.write_text("initgen_layout: 1\nname: per-layer\nroles:\n  soil_temperature: [tsoil1, tsoil2, tsoil3, "
                   "tsoil4, tsoil5]\n  layer_node_depth: {values: [0.05, 0.15, 0.35, 0.75, 1.5], units: m}\n"
                   "  land_fraction: landfrac\n")
    preview_report(recipe(tmp_path, taper=300), src, lay, tmp_path / "rep")
    page = Page((tmp_path / "rep" / "report.html").read_text())
    assert "tsoil1..5 (soil_temperature, change in K)" in page.plain
    cells = page.plain
    for k in range(1, 6):
        assert f"tsoil{k}" in cells
    assert "tsoil1+tsoil2" not in cells


def test_figure_and_html_modules_do_not_import_matplotlib():
    code = "import sys, initgen.reports.figures, initgen.reports.html_report, initgen.reports.compare, initgen.reports.preview, initgen.reports.verify, initgen.reports.mask; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"


def test_maps_across_the_dateline_are_drawn_in_one_piece(tmp_path):
    """A region across 180 degrees on a -180..180 grid: one frame, tick labels in the file's convention."""
    src = regular(tmp_path / "in.nc", lon0=-180.0, nlon=72, nlat=36)
    preview_report(recipe(tmp_path, w=160, e=220, s=20, n=60, taper=400), src, None, tmp_path / "rep")
    page = Page((tmp_path / "rep" / "report.html").read_text())
    assert all(png_size(d) == FIG_PIXELS for d in page.images())
    from initgen.reports.figures import frame_centre, to_frame
    from initgen.io.grid import open_model
    from initgen.io.stores import NetCDFStore

    store = NetCDFStore(src)
    try:
        grid = open_model(store, None).grid
    finally:
        store.close()
    w = ((grid.lon >= 160) | (grid.lon <= -140)) & (grid.lat > 20) & (grid.lat < 60)
    x = to_frame(grid.lon[w], frame_centre(grid, w.astype(float)))
    assert x.max() - x.min() <= 60.0 + 1e-9  # contiguous in the frame (160..220), not split at the seam (300)
