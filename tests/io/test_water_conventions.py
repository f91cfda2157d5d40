"""Soil water in every convention a layout supports, ice as stored, and packed variables.

The files come from ``tests/filemaker.py`` (one frozen soil state encoded in each convention).
Each output is decoded here with the definitions written out in the test, not with initgen's
own reading code: total = liquid + ice; a phase fraction is a share of the water *mass* (the CF
standard name table's definition of ``mass_fraction_of_unfrozen_water_in_soil_moisture``); a
true ice volume is its mass / 917 kg m-3 and a liquid equivalent its mass / 1000 kg m-3 (the
densities of ice at 0 C and of water, common practice; the constants of initgen.science.constants).
"""

from __future__ import annotations

import netCDF4
import numpy as np
import pytest

import filemaker as fm
from initgen import api
from initgen.science.soil import conversion
from initgen.science.soil.modes import PHASE_RULES
from initgen.science.soil.conversion import frozen_fraction
from initgen.science.soil.conversion import ice_volume_to_water_equivalent
from initgen.science.soil.conversion import phases_from_total
from initgen.science.soil.conversion import total_from_phases
from initgen.science.soil.conversion import water_equivalent_to_ice_volume
from initgen.errors import InputError
from clikit import read_raw as raw
from clikit import LAYOUTS

RHO_W, RHO_I = 1000.0, 917.0  # kg m-3: liquid water and ice at 0 C (common practice)

RECIPE = """initgen_recipe: 1
name: conventions
perturbations:
  - name: box
    region: {include: [{box: {lon: [-25, 25], lat: [-15, 15]}}], taper_km: 0}
    anomaly: {constant_K: DT}
    profile: {kind: exponential, efolding_m: 0.5}
physics: {mode: energy, texture: loam}
"""


def recipe(tmp_path, dT, extra=""):
    p = tmp_path / f"r{dT}.yaml"
    p.write_text(RECIPE.replace("DT", str(dT)) + extra)
    return p


def read(path, name, per_layer):
    if per_layer:
        return np.stack([raw(path, f"{name}_{k + 1}")[0] for k in range(fm.WATER_NODES.size)])
    return raw(path, name)[0]


def decode(path, convention, units, reading="liquid_equivalent", per_layer=False):
    """Liquid and ice of a file, kg m-2 per layer, from the definitions in the module docstring."""
    dz = fm.WATER_DZ[:, None, None]
    k = RHO_I / RHO_W if reading == "true_ice_volume" else 1.0  # stored ice volume -> liquid equivalent
    names = fm.WATER_VARS[convention]

    def vol(x):  # the file's amount -> m3 m-3 as stored
        if units == "kg m-2":
            return x / (RHO_W * dz)
        return x * fm.LOAM["porosity"] if units == "saturation_fraction" else x

    mass = units == "kg m-2"
    get = {role: read(path, name, per_layer) for role, name in names.items()}
    if convention == "liquid_and_ice":
        liq, ice = vol(get["soil_liquid"]), vol(get["soil_ice"]) * (1.0 if mass else k)
    elif convention == "total_and_liquid":
        liq = vol(get["soil_liquid"])
        ice = (vol(get["soil_water_total"]) - liq) * (1.0 if mass else k)
    elif convention in ("total_and_frozen_fraction", "total_and_unfrozen_fraction"):
        f = get.get("soil_frozen_fraction")
        f = 1.0 - get["soil_unfrozen_fraction"] if f is None else f
        kk = 1.0 if mass else k
        W = vol(get["soil_water_total"]) / ((1.0 - f) + f / kk)
        liq, ice = (1.0 - f) * W, f * W
    else:
        raise ValueError(convention)
    return liq * RHO_W * dz, ice * RHO_W * dz


CASES = [(c, u) for c in fm.WATER_VARS if c != "total_only" for u in ("kg m-2", "m3 m-3", "saturation_fraction")]


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The liquid + ice (kg m-2) file and its outputs for a cooling and a warming."""
    t = tmp_path_factory.mktemp("ref")
    f = fm.water_file(t / "ref.nc", "liquid_and_ice", "kg m-2")
    lay = fm.water_layout(t / "ref.yaml", "liquid_and_ice", "kg m-2")
    out = {}
    for dT in (-3, 4):
        o = t / f"ref{dT}.nc"
        rec = api.apply(recipe(t, dT), f, o, layout=lay)
        out[dT] = (decode(o, "liquid_and_ice", "kg m-2"), raw(o, "soil_temp")[0], rec["ledger"])
    out["before"] = decode(f, "liquid_and_ice", "kg m-2")
    return out


def test_reference_changes_phase(reference):
    """Not vacuous: the cooling freezes water (liquid above the freezing curve at the new
    temperature must freeze under any phase rule), and the warming crosses 273.15 K somewhere."""
    (liq0, ice0) = reference["before"]
    (liq, ice), T, led = reference[-3]
    assert (ice - ice0).max() > 0.1  # kg m-2
    assert led["physics"]["frozen_region_total_kg"] > 0
    _, T4, _ = reference[4]
    T0 = fm.frozen_state()[0]
    assert ((T0 < 273.15) & (T4 > 273.15)).any()


# a mass (kg m-2) needs no ice reading (declaring one is refused: see the error catalogue)
FULL = [(c, u, r, p) for c, u in CASES for r in ("liquid_equivalent", "true_ice_volume") for p in (False, True)
        if not (u == "kg m-2" and r == "true_ice_volume")]


@pytest.mark.parametrize("convention,units,reading,per_layer", FULL)
def test_each_convention_gives_the_liquid_and_ice_files_change(tmp_path, reference, convention, units, reading,
                                                               per_layer):
    f = fm.water_file(tmp_path / "in.nc", convention, units, ice_reading=reading, per_layer=per_layer)
    lay = fm.water_layout(tmp_path / "l.yaml", convention, units, per_layer=per_layer,
                          ice_reading=None if units == "kg m-2" else reading)
    liq0, ice0 = decode(f, convention, units, reading, per_layer)
    np.testing.assert_allclose(liq0, reference["before"][0], rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(ice0, reference["before"][1], rtol=1e-12, atol=1e-9)
    for dT in (-3, 4):
        o = tmp_path / f"o{dT}.nc"
        rec = api.apply(recipe(tmp_path, dT), f, o, layout=lay)
        (rl, ri), rT, rled = reference[dT]
        liq, ice = decode(o, convention, units, reading, per_layer)
        np.testing.assert_allclose(liq, rl, rtol=1e-9, atol=1e-7)  # kg m-2
        np.testing.assert_allclose(ice, ri, rtol=1e-9, atol=1e-7)
        np.testing.assert_allclose(raw(o, "soil_temp")[0], rT, atol=1e-4)
        # water mass (liquid + ice) of every layer conserved
        np.testing.assert_allclose(liq + ice, liq0 + ice0, rtol=1e-12, atol=1e-9)
        assert rec["ledger"]["physics"]["frozen_region_total_kg"] == pytest.approx(
            rled["physics"]["frozen_region_total_kg"], rel=1e-9)
        water = rec["ledger"]["water"]
        assert water["convention"] == convention
        # the file keeps its convention: a total in kg m-2 or liquid equivalent is never rewritten
        if convention != "liquid_and_ice" and (units == "kg m-2" or reading == "liquid_equivalent"):
            assert np.array_equal(read(o, "water_total", per_layer), read(f, "water_total", per_layer))
            totals = [v for n, v in rec["ledger"]["variables"].items() if "water_total" in n]
            assert totals and all(row["cells_changed"] == 0 for v in totals for row in v["layers"])
        if convention == "total_and_liquid" and dT == -3:
            assert not np.array_equal(read(o, "water_liquid", per_layer), read(f, "water_liquid", per_layer))


def test_total_only_diagnoses_the_split_and_writes_no_water(tmp_path, reference):
    """total_only: the split is the equilibrium one at the file's temperature and the model
    diagnoses it, so the equilibrium rule applies: the temperature change equals that of the
    liquid + ice file holding the same (equilibrium) state under phase_rule equilibrium; the
    total stays bit for bit and the model is told that the split is diagnosed."""
    f = fm.water_file(tmp_path / "in.nc", "total_only", "kg m-2")
    lay = LAYOUTS / "total-water-only.yaml"
    chk = api.check(recipe(tmp_path, -3), layout=lay, input=f)
    assert chk.model.water_convention == "total_only" and chk.model.phase_split_diagnosed
    assert "diagnosed from the soil temperature" in chk.summary()
    ref_in = fm.water_file(tmp_path / "ref.nc", "liquid_and_ice", "kg m-2")
    ref_lay = fm.water_layout(tmp_path / "ref.yaml", "liquid_and_ice", "kg m-2")
    for dT in (-3, 4):
        o = tmp_path / f"o{dT}.nc"
        rec = api.apply(recipe(tmp_path, dT), f, o, layout=lay)
        eq = recipe(tmp_path, dT).read_text().replace("texture: loam}", "texture: loam, phase_rule: equilibrium}")
        (tmp_path / "eq.yaml").write_text(eq)
        ref = api.apply(tmp_path / "eq.yaml", ref_in, tmp_path / f"ref{dT}.nc", layout=ref_lay)
        assert np.array_equal(raw(o, "water_total"), raw(f, "water_total"))
        np.testing.assert_allclose(raw(o, "soil_temp")[0], raw(tmp_path / f"ref{dT}.nc", "soil_temp")[0], atol=1e-4)
        assert rec["ledger"]["water"]["phase_split_diagnosed"] is True
        assert rec["ledger"]["physics"]["phase_rule"] == "equilibrium"
        for key in ("frozen_region_total_kg", "melted_region_total_kg"):
            assert rec["ledger"]["physics"][key] == pytest.approx(ref["ledger"]["physics"][key], rel=1e-6, abs=1e-3)


LAYOUT_FILES = {  # shipped example layout -> the file of its shape (convention, units, ice reading)
    "liquid-and-ice-water.yaml": ("liquid_and_ice", "m3 m-3", "liquid_equivalent"),
    "total-and-liquid-water.yaml": ("total_and_liquid", "kg m-2", "liquid_equivalent"),
    "total-and-frozen-fraction-water.yaml": ("total_and_frozen_fraction", "m3 m-3", "true_ice_volume"),
    "total-and-unfrozen-fraction-water.yaml": ("total_and_unfrozen_fraction", "saturation_fraction",
                                               "liquid_equivalent"),
    "total-water-only.yaml": ("total_only", "kg m-2", "liquid_equivalent"),
}


@pytest.mark.parametrize("name", sorted(LAYOUT_FILES))
def test_shipped_convention_layout_runs_on_a_file_of_its_shape(tmp_path, reference, name):
    convention, units, reading = LAYOUT_FILES[name]
    text = (LAYOUTS / name).read_text()
    assert text.startswith("# ") and f"convention: {convention}" in text
    f = fm.water_file(tmp_path / "in.nc", convention, units, ice_reading=reading)
    o = tmp_path / "o.nc"
    rec = api.apply(recipe(tmp_path, -3), f, o, layout=LAYOUTS / name)
    assert rec["ledger"]["water"]["convention"] == convention
    np.testing.assert_allclose(raw(o, "soil_temp")[0], reference[-3][1], atol=1e-4)
    if convention != "total_only":
        liq, ice = decode(o, convention, units, reading)
        np.testing.assert_allclose(ice, reference[-3][0][1], rtol=1e-9, atol=1e-7)


def test_cf_standard_names_find_a_total_and_liquid_file_without_layout(tmp_path):
    """mass_content_of_water_in_soil_layer (water in all phases) and liquid_water_content_of_soil_layer
    are CF standard names (CF standard name table, as the CMIP7 data request copies it)."""
    f = fm.water_file(tmp_path / "in.nc", "total_and_liquid", "kg m-2", cf_names=True)
    chk = api.check(recipe(tmp_path, -3), input=f)
    assert chk.model.water_convention == "total_and_liquid"
    assert chk.model.water.source == "told by the roles found"


def test_volumetric_ice_reading_is_reported_when_assumed(tmp_path):
    f = fm.water_file(tmp_path / "in.nc", "liquid_and_ice", "m3 m-3")
    lay = fm.water_layout(tmp_path / "l.yaml", "liquid_and_ice", "m3 m-3")
    chk = api.check(recipe(tmp_path, -3), layout=lay, input=f)
    assert "read as liquid equivalent (assumed: layout key water.volumetric_ice not given)" in chk.summary()
    led = api.preview(recipe(tmp_path, -3), f, layout=lay)
    assert led["water"]["volumetric_ice"] == "liquid_equivalent"
    assert led["water"]["volumetric_ice_from"].startswith("assumed")


def test_the_two_ice_readings_are_different_experiments(tmp_path):
    """Read as true volume, the same stored ice holds 917/1000 of the mass (8.3 % less; the
    conversion itself is tested below): the declared reading reaches the physics."""
    f = fm.water_file(tmp_path / "in.nc", "liquid_and_ice", "m3 m-3")
    a = fm.water_layout(tmp_path / "a.yaml", "liquid_and_ice", "m3 m-3", ice_reading="liquid_equivalent")
    b = fm.water_layout(tmp_path / "b.yaml", "liquid_and_ice", "m3 m-3", ice_reading="true_ice_volume")
    la = api.preview(recipe(tmp_path, -3), f, layout=a)
    lb = api.preview(recipe(tmp_path, -3), f, layout=b)
    assert lb["water"]["volumetric_ice"] == "true_ice_volume"
    # the phase change differs because the start differs: the readings are not interchangeable
    assert la["physics"]["frozen_region_total_kg"] != lb["physics"]["frozen_region_total_kg"]


# --- unit conversions of ice, totals and fractions (soil.py), against hand-worked values -----


def test_true_ice_volume_to_liquid_equivalent():
    """0.2 m3 m-3 of ice at 917 kg m-3 is 183.4 kg m-3 of water: 0.1834 m3 m-3 as liquid."""
    assert ice_volume_to_water_equivalent(0.2, "true_ice_volume") == pytest.approx(0.1834, rel=1e-12)
    assert water_equivalent_to_ice_volume(0.1834, "true_ice_volume") == pytest.approx(0.2, rel=1e-12)
    assert ice_volume_to_water_equivalent(0.2, "liquid_equivalent") == 0.2


def test_split_of_a_true_volume_total_by_frozen_mass_fraction():
    """W = 0.3 m3 m-3 of water (liquid equivalent), half of its mass frozen: 0.15 liquid and
    0.15 / 0.917 = 0.163577 m3 m-3 of ice, so the stored total is 0.313577 m3 m-3."""
    V = 0.15 + 0.15 / 0.917
    liq, ice = phases_from_total(V, 0.5, "frozen_fraction", "true_ice_volume")
    assert liq == pytest.approx(0.15, rel=1e-12) and ice == pytest.approx(0.15, rel=1e-12)
    liq, ice = phases_from_total(V, 0.5, "unfrozen_fraction", "true_ice_volume")
    assert liq == pytest.approx(0.15, rel=1e-12)
    assert total_from_phases(0.15, 0.15, "true_ice_volume") == pytest.approx(V, rel=1e-12)
    liq, ice = phases_from_total(0.3, 0.1, "liquid")
    assert (liq, ice) == (pytest.approx(0.1), pytest.approx(0.2))
    assert frozen_fraction(0.1, 0.3) == pytest.approx(0.75)
    assert np.isnan(frozen_fraction(0.0, 0.0))


# --- packed variables ------------------------------------------------------------------------

PACKED = """initgen_recipe: 1
name: packed
perturbations:
  - name: box
    region: {include: [{box: {lon: [-25, 25], lat: [-15, 15]}}], taper_km: 0}
    anomaly: {constant_K: 10}
"""


def _packed_top(path):
    """The highest value int16 packing can hold: 32767 * scale_factor + add_offset (NetCDF User
    Guide, packed data: unpacked = packed * scale_factor + add_offset)."""
    with netCDF4.Dataset(path) as ds:
        v = ds["soil_temp"]
        return 32767 * float(v.scale_factor) + float(v.add_offset)


def _expected_over(path):
    T0 = raw(path, "soil_temp")[0] * 1.0
    with netCDF4.Dataset(path) as ds:
        v = ds["soil_temp"]
        T0 = T0 * float(v.scale_factor) + float(v.add_offset)
    box = (np.abs(fm.WATER_LON) < 25)[None, None, :] & (np.abs(fm.WATER_LAT) < 15)[None, :, None]
    return np.broadcast_to(box, T0.shape) & (T0 + 10.0 > _packed_top(path) + 0.5 * 1e-3), T0


def test_packed_variable_that_cannot_hold_the_change_is_refused(tmp_path):
    f = fm.packed_temperature_file(tmp_path / "p.nc", headroom_K=5.9)
    over, _ = _expected_over(f)
    n = int(over.sum())
    assert n > 0
    r = tmp_path / "r.yaml"
    r.write_text(PACKED)
    for call in (lambda: api.preview(r, f), lambda: api.apply(r, f, tmp_path / "o.nc")):
        with pytest.raises(InputError) as exc:
            call()
        msg = str(exc.value)
        assert "'soil_temp'" in msg and f"{n} cell(s)" in msg and "limits.packed_out_of_range" in msg
        assert f"{_packed_top(f):.6g}" in msg
    assert not (tmp_path / "o.nc").exists()


def test_packed_clipping_when_allowed_is_counted_as_clamps(tmp_path):
    f = fm.packed_temperature_file(tmp_path / "p.nc", headroom_K=5.9)
    over, T0 = _expected_over(f)
    r = tmp_path / "r.yaml"
    r.write_text(PACKED + "limits: {packed_out_of_range: clip}\n")
    led = api.preview(r, f)
    rec = api.apply(r, f, tmp_path / "o.nc")
    assert led["clamps"]["soil_temp_outside_packed_range"] == int(over.sum())
    assert rec["ledger"]["clamps"] == led["clamps"]  # preview counts exactly as apply
    out = raw(tmp_path / "o.nc", "soil_temp")[0]
    assert (out[over] == 32767).all()  # clipped to the top of the type
    assert (out[~over & (T0 + 10 < _packed_top(f) - 1)] < 32767).all()


def test_layout_water_units_override_a_files_misleading_attribute(tmp_path, reference):
    """A fraction of saturation written with units '1' would read as m3 m-3 (wrong by the
    porosity, 0.451 for loam); layout key water.units says what the numbers are."""
    f = fm.water_file(tmp_path / "in.nc", "total_and_liquid", "saturation_fraction")
    for name in ("water_total", "water_liquid"):
        with netCDF4.Dataset(f, "a") as ds:
            ds[name].units = "1"
    lay = fm.water_layout(tmp_path / "l.yaml", "total_and_liquid", "m3 m-3")
    lay.write_text(lay.read_text() + "  units: {soil_water_total: saturation_fraction, soil_liquid: saturation_fraction}\n")
    chk = api.check(recipe(tmp_path, -3), layout=lay, input=f)
    assert "soil_water_total in 'saturation_fraction' (layout key water.units)" in chk.summary()
    o = tmp_path / "o.nc"
    rec = api.apply(recipe(tmp_path, -3), f, o, layout=lay)
    liq, ice = decode(o, "total_and_liquid", "saturation_fraction")
    np.testing.assert_allclose(ice, reference[-3][0][1], rtol=1e-9, atol=1e-7)
    assert sorted(rec["ledger"]["water"]["units_from_layout"]) == ["soil_liquid", "soil_water_total"]


def test_a_total_beside_liquid_and_ice_is_named_as_kept(tmp_path):
    f = fm.water_file(tmp_path / "in.nc", "liquid_and_ice", "kg m-2")
    T, liq, ice = fm.frozen_state()
    with netCDF4.Dataset(f, "a") as ds:
        v = ds.createVariable("water_total", "f8", ("time", "soil_layer", "lat", "lon"))
        v.units = "kg m-2"
        v[:] = ((liq + ice) * 1000.0 * fm.WATER_DZ[:, None, None])[None]
    lay = fm.water_layout(tmp_path / "l.yaml", "liquid_and_ice", "kg m-2")
    lay.write_text(lay.read_text().replace("  soil_ice: water_ice\n", "  soil_ice: water_ice\n  soil_water_total: water_total\n"))
    chk = api.check(recipe(tmp_path, -3), layout=lay, input=f)
    assert "soil_water_total 'water_total' left as they are" in chk.summary()
    o = tmp_path / "o.nc"
    api.apply(recipe(tmp_path, -3), f, o, layout=lay)
    assert np.array_equal(raw(o, "water_total"), raw(f, "water_total"))
    liq1, ice1 = decode(o, "liquid_and_ice", "kg m-2")
    np.testing.assert_allclose(liq1 + ice1, raw(f, "water_total")[0], rtol=1e-12)  # still the total


def test_dry_layer_with_a_filled_fraction_holds_no_water():
    liq, ice = phases_from_total(np.array([0.0, 0.3]), np.array([np.nan, 0.5]), "frozen_fraction")
    assert liq.tolist() == [0.0, 0.15] and ice.tolist() == [0.0, 0.15]


@pytest.mark.parametrize("convention", ["total_and_liquid", "total_and_frozen_fraction", "total_only"])
def test_donor_blend_moves_the_total_in_total_conventions(tmp_path, convention):
    """A donor transplants water: where the weight is 1 the file's total becomes the donor's
    (blend new = (1 - w) old + w donor), in every convention that keeps a total."""
    f = fm.water_file(tmp_path / "a.nc", convention, "kg m-2", seed=0)
    d = fm.water_file(tmp_path / "donor.nc", convention, "kg m-2", seed=5)
    lay = fm.water_layout(tmp_path / "l.yaml", convention, "kg m-2")
    r = tmp_path / "d.yaml"
    r.write_text(RECIPE.replace("anomaly: {constant_K: DT}", "anomaly: {donor: {file: donor.nc}}").replace(
        "    profile: {kind: exponential, efolding_m: 0.5}\n", ""))
    o = tmp_path / "o.nc"
    api.apply(r, f, o, layout=lay)
    box = (np.abs(fm.WATER_LON) < 25)[None, None, :] & (np.abs(fm.WATER_LAT) < 15)[None, :, None]
    box = np.broadcast_to(box, raw(f, "water_total")[0].shape)
    np.testing.assert_allclose(raw(o, "water_total")[0][box], raw(d, "water_total")[0][box], rtol=1e-12)
    assert np.array_equal(raw(o, "water_total")[0][~box], raw(f, "water_total")[0][~box])


@pytest.mark.parametrize("convention", ["total_and_liquid", "total_and_unfrozen_fraction"])
def test_float32_total_stays_bit_for_bit_and_water_is_conserved_to_its_precision(tmp_path, convention):
    """Restarts often store float32: the total is not rewritten, and liquid + ice read back from
    the output equals the input's to float32 precision (2**-23 relative, IEEE 754)."""
    f = fm.water_file(tmp_path / "in.nc", convention, "kg m-2", dtype="f4")
    lay = fm.water_layout(tmp_path / "l.yaml", convention, "kg m-2")
    o = tmp_path / "o.nc"
    api.apply(recipe(tmp_path, -3), f, o, layout=lay)
    assert np.array_equal(raw(o, "water_total"), raw(f, "water_total"))
    l0, i0 = decode(f, convention, "kg m-2")
    l1, i1 = decode(o, convention, "kg m-2")
    assert not np.allclose(i1, i0)  # water froze
    np.testing.assert_allclose(l1 + i1, l0 + i0, rtol=2.0 ** -22)


def test_cf_volume_fraction_of_frozen_water_is_read_as_true_ice_volume(tmp_path, reference):
    """CF defines volume_fraction_of_frozen_water_in_soil as the volume of the ice divided by the
    volume of the soil (CF standard name table, version-68 update): a true ice volume."""
    f = fm.water_file(tmp_path / "in.nc", "liquid_and_ice", "m3 m-3", ice_reading="true_ice_volume", cf_names=True)
    with netCDF4.Dataset(f, "a") as ds:
        ds["water_liquid"].standard_name = "volume_fraction_of_liquid_water_in_soil"
        ds["water_ice"].standard_name = "volume_fraction_of_frozen_water_in_soil"
    chk = api.check(recipe(tmp_path, -3), input=f)
    assert chk.model.water.ice_reading == "true_ice_volume"
    assert "CF standard_name volume_fraction_of_frozen_water_in_soil" in chk.summary()
    o = tmp_path / "o.nc"
    api.apply(recipe(tmp_path, -3), f, o)
    liq, ice = decode(o, "liquid_and_ice", "m3 m-3", "true_ice_volume")
    np.testing.assert_allclose(ice, reference[-3][0][1], rtol=1e-9, atol=1e-7)


try:
    from hypothesis import given, settings, strategies as st
except ImportError:  # pragma: no cover
    given = None

if given is not None:
    _frac = st.floats(0.0, 1.0, allow_nan=False)
    _vol = st.floats(0.0, 0.6, allow_nan=False)

    @settings(max_examples=200, deadline=None)
    @given(liq=_vol, ice=_vol, reading=st.sampled_from(conversion.ICE_READINGS),
           kind=st.sampled_from(["liquid", "frozen_fraction", "unfrozen_fraction"]))
    def test_every_split_round_trips(liq, ice, reading, kind):
        """Encoding a state in a convention and reading it back gives the state (water mass kept)."""
        total = total_from_phases(liq, ice, reading)
        f = frozen_fraction(liq, ice)
        other = {"liquid": liq, "frozen_fraction": f, "unfrozen_fraction": 1.0 - f}[kind]
        if liq + ice == 0.0:
            other = 0.0
        l2, i2 = phases_from_total(total, other, kind, reading)
        assert float(l2) == pytest.approx(liq, abs=1e-12) and float(i2) == pytest.approx(ice, abs=1e-12)


def test_float_variable_with_valid_max_refuses_a_change_that_would_read_back_as_missing(tmp_path):
    """NetCDF User Guide, attribute conventions: values outside valid_range/valid_max are to be
    treated as missing, so writing one would silently turn a warmed cell into a gap."""
    f = fm.water_file(tmp_path / "in.nc", "total_only", "kg m-2")
    with netCDF4.Dataset(f, "a") as ds:
        ds["soil_temp"].valid_max = np.float32(274.0)
    r = tmp_path / "r.yaml"
    r.write_text(PACKED)  # +10 K
    T0 = raw(f, "soil_temp")[0]
    box = (np.abs(fm.WATER_LON) < 25)[None, None, :] & (np.abs(fm.WATER_LAT) < 15)[None, :, None]
    n = int((np.broadcast_to(box, T0.shape) & (T0 + 10.0 > 274.0)).sum())
    with pytest.raises(InputError, match=f"'soil_temp'.*{n} cell"):
        api.preview(r, f, layout=fm.water_layout(tmp_path / "l.yaml", "total_only"))
    r.write_text(PACKED + "limits: {packed_out_of_range: clip}\n")
    led = api.preview(r, f, layout=tmp_path / "l.yaml")
    assert led["clamps"]["soil_temp_outside_packed_range"] == n


# ---------------------------------------------------------------------------------------------
# The phase rules' invariants on a file of each convention (issue: phase change as the model
# itself would make it). Decoded with the definitions above, not with initgen's reading code.
# ---------------------------------------------------------------------------------------------

@pytest.mark.parametrize("convention", [c for c in fm.WATER_VARS if c != "total_only"])
@pytest.mark.parametrize("rule", PHASE_RULES)
@pytest.mark.parametrize("mode", ["energy", "temperature"])
def test_invariants_hold_on_every_convention(tmp_path, convention, rule, mode):
    """For a cooling (-3 K) and a warming (+2 K) of the frozen state: water (liquid + ice, kg m-2
    decoded from the written file) is conserved per cell to 1e-9 kg m-2; the temperature change
    never has the sign opposite to the imposed one; energy mode changes by no more than the
    imposed change, temperature mode by exactly it (exponential profile, e-folding 0.5 m,
    f(z) from the layer means); the ledger's measured invariants agree; the change-driven rule
    melts nothing under a warming that stays below 0 C."""
    units = "kg m-2"
    f = fm.water_file(tmp_path / "in.nc", convention, units)
    lay = fm.water_layout(tmp_path / "l.yaml", convention, units)
    liq0, ice0 = decode(f, convention, units)
    T0 = raw(f, "soil_temp")[0]
    extra = f"  phase_rule: {rule}\n"
    for dT in (-3, 2):
        text = RECIPE.replace("DT", str(dT)).replace("mode: energy", f"mode: {mode}")
        text = text.replace("physics: {mode: " + mode + ", texture: loam}",
                            "physics:\n  mode: " + mode + "\n  texture: loam\n" + extra)
        rec = tmp_path / f"r{dT}.yaml"
        rec.write_text(text)
        out = tmp_path / f"o{dT}.nc"
        led = api.apply(rec, f, out, layout=lay)["ledger"]
        liq1, ice1 = decode(out, convention, units)
        T1 = raw(out, "soil_temp")[0]
        np.testing.assert_allclose(liq1 + ice1, liq0 + ice0, rtol=0, atol=1e-9)
        d = T1 - T0
        assert np.all(d * dT >= 0), (convention, rule, mode, dT)
        assert np.all(np.abs(d) <= abs(dT) + 1e-9)
        changed = d != 0
        assert changed.any()
        inv = led["physics"]["invariants"]
        assert inv["cells_change_opposite_to_imposed"] == 0
        assert abs(inv["water_change_relative"]) < 1e-12
        if mode == "energy":
            assert inv["cells_change_beyond_imposed"] == 0 and inv["max_energy_budget_rel_error"] < 1e-6
        else:
            assert inv["cells_change_not_equal_to_imposed"] == 0
        if rule == "change_driven" and dT > 0:
            stays_frozen = T1 < 273.15
            assert np.all((ice1 - ice0)[stays_frozen] >= -1e-9)       # no melting below 0 C
        assert led["physics"]["phase_rule"] == rule


def test_total_only_uses_the_equilibrium_rule_and_says_so(tmp_path):
    """A file with only total water: its model diagnoses the split from temperature, so the
    equilibrium rule is used whatever the recipe says, and the ledger's notes say why."""
    f = fm.water_file(tmp_path / "in.nc", "total_only", "kg m-2")
    lay = fm.water_layout(tmp_path / "l.yaml", "total_only", "kg m-2")
    led = api.preview(recipe(tmp_path, 2), f, layout=lay)
    assert led["physics"]["phase_rule"] == "equilibrium"
    assert "diagnoses" in led["notes"]["phase_rule"]
