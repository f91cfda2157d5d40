"""The two phase rules of the soil physics (issue: no spurious melting or freezing, ever).

The change-driven rule (the default) changes phase only where the imposed change requires it,
as models with a one-sided rule do: cooling freezes only liquid above the supercooled curve at
the new temperature (Niu and Yang 2006), warming melts ice only where the temperature would rise
above T_f = 273.15 K, and in energy mode a layer at T_f with both phases stays there until the
latent heat is paid. The equilibrium rule puts the new state on the equilibrium curve.

Hand-worked examples compute the expected values in the test with the formula shown; the
property tests check the invariants over random states (hypothesis).

Constants: L_f = 3.337e5 J kg-1, rho_w = 1000 kg m-3, c_w = 4188, c_i = 2117.27 J kg-1 K-1
(the constant set of initgen.science.constants); loam parameters of Clapp and Hornberger (1978),
Table 2: porosity 0.451, |psi_s| = 47.8 cm, b = 5.39.
"""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from initgen.science.soil import properties
from initgen.science.soil.properties import Hydraulics
from initgen.errors import InputError
from initgen.science.soil import modes
from initgen.science.soil.modes import apply_energy_mode
from initgen.science.soil.modes import apply_temperature_mode
from initgen.science.soil.properties import blend_organic
from initgen.science.soil.properties import enthalpy
from initgen.science.soil.freezing import equilibrium_shift
from initgen.science.soil.properties import heat_capacity
from initgen.science.soil.modes import settle_one_sided
from initgen.science.soil.freezing import supercooled_liquid_max
from initgen.science.soil.properties import texture_solid_heat_capacity
from initgen.science.constants import CP_ICE, CV_WATER, LATENT_HEAT_FUSION, RHO_WATER, T_FREEZE

LOAM = (0.451, 0.478, 5.39)          # Clapp and Hornberger (1978), Table 2
CS = 2.2565e6                        # solids heat capacity used in the hand examples, J m-3 K-1
L = RHO_WATER * LATENT_HEAT_FUSION   # J per m3 of liquid water
CI = RHO_WATER * CP_ICE              # ice, per m3 of liquid-water equivalent
DZ = 0.1                             # a layer 10 cm thick


def C(liq, ice, phi=LOAM[0]):
    """Heat capacity by de Vries (1963) mixing, written out: (1 - phi) c_s + c_w liq + c_i ice."""
    return (1 - phi) * CS + CV_WATER * liq + CI * ice


def lmax(T):
    """Niu and Yang (2006): theta_s (L_f (T_f - T) / (g T |psi_s|))^(-1/b), written out."""
    phi, psi, b = LOAM
    return phi * (LATENT_HEAT_FUSION * (T_FREEZE - T) / (9.80616 * T * psi)) ** (-1.0 / b)


def run(mode, T, liq, ice, dT, rule="change_driven"):
    fn = apply_energy_mode if mode == "energy" else apply_temperature_mode
    r = fn(T, liq, ice, dT, DZ, *LOAM, CS, rule=rule)
    return {k: float(v) for k, v in r._asdict().items()}


# =============================================================================================
# Hand-worked one-sided examples (the cases)
# =============================================================================================

def test_at_freezing_with_both_phases_cooled_by_a_hundredth_of_a_kelvin():
    """Loam at 273.15 K, 0.20 liquid / 0.15 ice, dT = -0.01 K. The liquid freezes only when the
    curve at the new temperature falls below 0.20: lmax(T) = 0.20 at
    T_k = T_f / (1 + (0.20/0.451)^-5.39 * g |psi_s| / L_f), about 272.84 K, far below
    273.14 K. So no water changes phase; energy mode cools by C0 dT / C0 = -0.01 K exactly."""
    T_k = T_FREEZE / (1 + (0.20 / 0.451) ** -5.39 * 9.80616 * 0.478 / LATENT_HEAT_FUSION)
    assert 272.8 < T_k < 272.9
    for mode in ("energy", "temperature"):
        r = run(mode, T_FREEZE, 0.20, 0.15, -0.01)
        assert r["T"] == pytest.approx(T_FREEZE - 0.01, abs=1e-9), mode
        assert r["liq"] == 0.20 and r["ice"] == 0.15, mode
        assert r["frozen_kg_m2"] == 0 and r["melted_kg_m2"] == 0, mode
    # the equilibrium rule instead diagnoses the layer at T_f as all liquid (0.35 < porosity)
    # and then freezes back only what the curve requires: 15 kg m-2 of ice are gone
    r = run("temperature", T_FREEZE, 0.20, 0.15, -0.01, rule="equilibrium")
    assert r["ice"] == 0.0


def test_at_freezing_with_both_phases_warmed_by_a_tenth_of_a_kelvin():
    """Same layer, dT = +0.1 K. Energy mode: the layer stays at T_f while the energy
    C0 dT dz melts ice: m = C0 * 0.1 / (rho_w L_f) m3 m-3, i.e. m * rho_w * dz kg m-2.
    C0 = 0.549 * 2.2565e6 + 4.188e6 * 0.20 + 2.11727e6 * 0.15 = 2.394009e6 J m-3 K-1,
    m = 2.394009e5 / 3.337e8 = 7.1742e-4 m3 m-3 = 0.071742 kg m-2.
    Temperature mode: T = 273.25 K > T_f, so no ice can remain: all 15 kg m-2 melt."""
    C0 = C(0.20, 0.15)
    assert C0 == pytest.approx(2.394009e6, rel=1e-7)
    m = C0 * 0.1 / L
    r = run("energy", T_FREEZE, 0.20, 0.15, 0.1)
    assert r["T"] == T_FREEZE
    assert r["melted_kg_m2"] == pytest.approx(m * RHO_WATER * DZ, rel=1e-9)
    assert r["melted_kg_m2"] == pytest.approx(0.071742, abs=1e-6)
    assert r["sensible_J_m2"] + r["latent_J_m2"] == pytest.approx(C0 * 0.1 * DZ, rel=1e-9)
    r = run("temperature", T_FREEZE, 0.20, 0.15, 0.1)
    assert r["T"] == pytest.approx(273.25, abs=1e-12)
    assert r["ice"] == 0.0 and r["melted_kg_m2"] == pytest.approx(15.0, rel=1e-12)


@pytest.mark.parametrize("dT", [0.1, -0.1])
def test_frozen_loam_below_the_curve_under_a_tenth_of_a_kelvin(dT):
    """Loam at 268.15 K with 0.05 liquid / 0.25 ice: the curve allows lmax(268.15) = 0.1188
    (REFERENCES.md worked value), so 0.05 lies below it, a state one-sided models hold as
    stable. Warming by 0.1 K stays below T_f: no melting. Cooling by 0.1 K:
    lmax(268.05) = 0.1186 > 0.05: no freezing. Both modes change T by dT exactly (energy
    mode: the phase is fixed, so C1 = C0 and dT = C0 dT / C0)."""
    assert lmax(268.15) == pytest.approx(0.1188, abs=1e-4)
    assert lmax(268.05) > 0.05
    for mode in ("energy", "temperature"):
        r = run(mode, 268.15, 0.05, 0.25, dT)
        assert r["T"] == pytest.approx(268.15 + dT, abs=1e-9), mode
        assert r["liq"] == 0.05 and r["ice"] == 0.25, mode
    # the equilibrium rule would first melt ice up to the curve (6.9 kg m-2 here)
    r = run("temperature", 268.15, 0.05, 0.25, dT, rule="equilibrium")
    assert r["liq"] == pytest.approx(lmax(268.15 + dT), rel=1e-9)


def test_warming_a_frozen_layer_through_freezing_in_energy_mode():
    """Loam at 265 K with 0.05 liquid / 0.02 ice, energy of +20 K. By hand:
    C0 = 0.549 * 2.2565e6 + 4.188e6 * 0.05 + 2.11727e6 * 0.02 = 1.4905639e6 J m-3 K-1;
    e = 20 C0 = 2.9811e7 J m-3; to reach T_f: 8.15 C0 = 1.2148e7; left 1.7663e7;
    melting all 0.02 of ice costs 0.02 L = 6.674e6; left e3 = 1.0989e7 J m-3 warms the
    all-liquid layer, C1 = C0 + (c_w - c_i) 0.02 = 1.5319785e6: T = 273.15 + e3 / C1 = 280.323 K,
    so the layer crosses freezing and ends 15.323 K warmer (less than 20 K: latent heat)."""
    C0 = C(0.05, 0.02)
    e3 = 20 * C0 - (T_FREEZE - 265.0) * C0 - 0.02 * L
    C1 = C(0.07, 0.0)
    r = run("energy", 265.0, 0.05, 0.02, 20.0)
    assert r["T"] == pytest.approx(T_FREEZE + e3 / C1, abs=1e-9)
    assert r["T"] == pytest.approx(280.323, abs=1e-3)
    assert r["T"] > T_FREEZE
    assert r["ice"] == 0.0 and r["melted_kg_m2"] == pytest.approx(0.02 * RHO_WATER * DZ, rel=1e-9)


def test_cooling_from_above_the_curve_keeps_the_excess_liquid_as_it_is():
    """Input disequilibrium is reported, not acted on: loam at 270 K holding 0.25 liquid,
    above lmax(270) (about 0.13). Cooling by 1 K freezes only the curve's own drop,
    lmax(270) - lmax(269), in temperature mode; the excess above the starting curve stays."""
    r = run("temperature", 270.0, 0.25, 0.05, -1.0)
    assert r["liq"] == pytest.approx(0.25 - (lmax(270.0) - lmax(269.0)), rel=1e-9)
    r = run("energy", 270.0, 0.25, 0.05, -1.0)
    assert -1.0 <= r["T"] - 270.0 < 0


def test_unknown_rule_is_refused():
    with pytest.raises(InputError, match="phase_rule"):
        apply_energy_mode(270.0, 0.1, 0.1, 1.0, 0.1, *LOAM, rule="nearest")


def test_equilibrium_shift_reports_what_the_equilibrium_rule_would_move():
    """At 268.15 K the equilibrium liquid is lmax = 0.1188: a layer with 0.05 liquid / 0.25
    ice would melt 0.0688 m3 m-3; one with 0.20 / 0.10 would freeze 0.0812."""
    d = equilibrium_shift([268.15, 268.15], [0.05, 0.20], [0.25, 0.10], *LOAM)
    np.testing.assert_allclose(d, [-(lmax(268.15) - 0.05), 0.20 - lmax(268.15)], rtol=1e-9)


# =============================================================================================
# Invariants as properties
# =============================================================================================

PROP = settings(max_examples=600, deadline=None, derandomize=True)


@st.composite
def cells(draw, consistent=None):
    """A layer and an anomaly. ``consistent``: a state a one-sided model holds (below T_f no
    liquid above the curve; above T_f no ice); otherwise an arbitrary split."""
    phi = draw(st.floats(0.30, 0.60))
    psi = draw(st.floats(0.03, 0.80))
    b = draw(st.floats(3.0, 12.0))
    cs = draw(st.floats(1.9e6, 2.5e6))
    dz = draw(st.floats(0.01, 2.0))
    W = phi * draw(st.one_of(st.just(0.0), st.just(1.0), st.floats(0.0, 1.0)))
    T = draw(st.one_of(st.just(T_FREEZE), st.floats(230.0, 300.0)))
    f = draw(st.one_of(st.just(0.0), st.just(1.0), st.floats(0.0, 1.0)))
    cons = draw(st.booleans()) if consistent is None else consistent
    if cons and T < T_FREEZE:
        cap = min(W, float(supercooled_liquid_max(T, phi, psi, b)))
        liq = cap * f
    elif cons and T > T_FREEZE:
        liq = W
    else:
        liq = W * f
    ice = W - liq
    dT = draw(st.one_of(st.floats(-15.0, -1e-3), st.floats(1e-3, 15.0)))
    return dict(T=T, liq=liq, ice=ice, dT=dT, dz=dz, phi=phi, psi=psi, b=b, cs=cs, consistent=cons)


def _apply(mode, c, rule="change_driven"):
    fn = apply_energy_mode if mode == "energy" else apply_temperature_mode
    return fn(c["T"], c["liq"], c["ice"], c["dT"], c["dz"], c["phi"], c["psi"], c["b"], c["cs"], rule=rule)


@PROP
@given(c=cells())
def test_property_water_conserved_and_sign_kept(c):
    for rule in modes.PHASE_RULES:
        for mode in ("energy", "temperature"):
            r = _apply(mode, c, rule)
            W0, W1 = c["liq"] + c["ice"], float(r.liq + r.ice)
            assert abs(W1 - W0) <= 1e-12 * max(W0, 1e-300) + 1e-15, (rule, mode)
            assert r.liq >= 0 and r.ice >= -1e-15, (rule, mode)
            assert (float(r.T) - c["T"]) * c["dT"] >= 0, (rule, mode)   # never the opposite sign


@PROP
@given(c=cells())
def test_property_energy_mode_budget(c):
    """|dT| <= |imposed dT|; the enthalpy change equals C0 dT dz (1e-6 relative); the phase
    change is what that energy can pay for: |d ice| rho_w L_f dz <= C0 |dT| dz (+ round-off)."""
    r = _apply("energy", c)
    C0 = heat_capacity(c["liq"], c["ice"], c["phi"], c["cs"])
    target = C0 * c["dT"] * c["dz"]
    H0 = enthalpy(c["T"], c["liq"], c["ice"], c["dz"], c["phi"], c["cs"])
    H1 = enthalpy(r.T, r.liq, r.ice, c["dz"], c["phi"], c["cs"])
    assert abs(float(r.T) - c["T"]) <= abs(c["dT"]) * (1 + 1e-12) + 1e-9
    assert abs((H1 - H0) - target) <= 1e-6 * abs(target)
    dice = abs(float(r.ice) - c["ice"])
    assert dice * L * c["dz"] <= abs(target) * (1 + 1e-9) + 1e-6


@PROP
@given(c=cells())
def test_property_temperature_mode_exact(c):
    r = _apply("temperature", c)
    assert float(r.T) == c["T"] + c["dT"]


@PROP
@given(c=cells(consistent=True))
def test_property_consistent_state_stays_consistent(c):
    """From a state the rule holds as stable, the result has no liquid above the curve below
    T_f and no ice above T_f (to round-off of the solver: 1e-9 m3 m-3)."""
    for mode in ("energy", "temperature"):
        r = _apply(mode, c)
        T1 = float(r.T)
        if T1 < T_FREEZE:
            assert r.liq <= supercooled_liquid_max(T1, c["phi"], c["psi"], c["b"]) + 1e-9, mode
        if T1 > T_FREEZE:
            assert r.ice <= 1e-12, mode


@PROP
@given(c=cells())
def test_property_no_phase_change_that_the_change_does_not_require(c):
    """Warming never freezes and, below T_f, never melts; cooling never melts."""
    for mode in ("energy", "temperature"):
        r = _apply(mode, c)
        if c["dT"] > 0:
            assert float(r.frozen_kg_m2) == 0.0, mode
            if float(r.T) < T_FREEZE:
                assert float(r.liq) == c["liq"], mode
        else:
            assert float(r.melted_kg_m2) == 0.0, mode


def test_settle_one_sided_changes_phase_only_where_the_temperature_requires_it():
    """Loam (Clapp and Hornberger 1978) with the Niu and Yang (2006) limit lmax(268.15) = 0.1188
    (REFERENCES.md worked value): 0.20 liquid at 268.15 K freezes down to 0.1188; 0.05 liquid
    with ice there is stable and kept; ice at 275 K melts; a layer at T_f is left as it is."""
    liq, ice = settle_one_sided([268.15, 268.15, 275.0, T_FREEZE], [0.20, 0.05, 0.1, 0.2],
                                     [0.05, 0.25, 0.1, 0.15], *LOAM)
    np.testing.assert_allclose(liq, [lmax(268.15), 0.05, 0.2, 0.2], rtol=1e-12)
    np.testing.assert_allclose(ice, [0.25 - lmax(268.15) + 0.0, 0.25, 0.0, 0.15], rtol=1e-12)
    assert liq[0] == pytest.approx(0.1188, abs=1e-4)


# =============================================================================================
# Soil properties: texture-class heat capacity, organic soil
# =============================================================================================

def _usda_class(sand, clay):
    """The twelve USDA texture classes from their definitions in the Soil Survey Manual (Soil
    Science Division Staff 2017, USDA Handbook 18); percentages of sand, silt and clay."""
    silt = 100.0 - sand - clay
    return [
        ("sand", (silt + 1.5 * clay) < 15),
        ("loamy sand", ((silt + 1.5 * clay) >= 15) & ((silt + 2 * clay) < 30)),
        ("sandy loam", (((clay >= 7) & (clay < 20) & (sand > 52)) | ((clay < 7) & (silt < 50)))
         & ((silt + 2 * clay) >= 30)),
        ("loam", (clay >= 7) & (clay < 27) & (silt >= 28) & (silt < 50) & (sand <= 52)),
        ("silt loam", ((silt >= 50) & (clay >= 12) & (clay < 27)) | ((silt >= 50) & (silt < 80) & (clay < 12))),
        ("silt", (silt >= 80) & (clay < 12)),
        ("sandy clay loam", (clay >= 20) & (clay < 35) & (silt < 28) & (sand > 45)),
        ("clay loam", (clay >= 27) & (clay < 40) & (sand > 20) & (sand <= 45)),
        ("silty clay loam", (clay >= 27) & (clay < 40) & (sand <= 20)),
        ("sandy clay", (clay >= 35) & (sand > 45)),
        ("silty clay", (clay >= 40) & (silt >= 40)),
        ("clay", (clay >= 40) & (sand <= 45) & (silt < 40)),
    ]


def test_texture_class_centroids_follow_from_the_class_definitions():
    """The definitions partition the triangle (every composition in exactly one class); the
    centroid table is the mean composition of each class; three classes with simple polygons
    are checked against shapely's polygon centroid (vertices from the same definitions):
    sand (85,0)-(100,0)-(90,10), loamy sand (70,0)-(85,0)-(90,10)-(85,15) and silty clay
    (0,40)-(20,40)-(0,60) in (sand, clay) percent."""
    from shapely.geometry import Polygon

    g = np.arange(0.05, 100, 0.1)
    S, Cl = np.meshgrid(g, g)
    ok = S + Cl < 100
    S, Cl = S[ok], Cl[ok]
    classes = _usda_class(S, Cl)
    assert np.all(sum(c.astype(int) for _, c in classes) == 1)
    for name, m in classes:
        if name == "silt":               # not a Clapp and Hornberger (1978) class
            continue
        sand, clay = properties.TEXTURE_CLASS_CENTROID_PCT[name]
        assert sand == pytest.approx(S[m].mean(), abs=0.06), name
        assert clay == pytest.approx(Cl[m].mean(), abs=0.06), name
    for name, verts in (("sand", [(85, 0), (100, 0), (90, 10)]),
                        ("loamy sand", [(70, 0), (85, 0), (90, 10), (85, 15)]),
                        ("silty clay", [(0, 40), (20, 40), (0, 60)])):
        c = Polygon(verts).centroid
        assert properties.TEXTURE_CLASS_CENTROID_PCT[name] == pytest.approx((c.x, c.y), abs=0.1), name
    assert set(properties.TEXTURE_CLASS_CENTROID_PCT) == set(properties.CLAPP_HORNBERGER_1978)


def test_texture_class_heat_capacity_uses_the_texture_formula():
    """Loam: centroid 41.0 % sand, 18.3 % clay; c_s = (2.128 * 41.0 + 2.385 * 18.3) / 59.3 * 1e6
    = 2.2073e6 J m-3 K-1 (texture formula of REFERENCES.md, de Vries 1963 values)."""
    assert texture_solid_heat_capacity("Loam") == pytest.approx(
        (2.128e6 * 41.0 + 2.385e6 * 18.3) / 59.3, rel=1e-12)
    assert texture_solid_heat_capacity("loam") == pytest.approx(2.2073e6, rel=1e-4)
    with pytest.raises(InputError, match="Clapp and Hornberger"):
        texture_solid_heat_capacity("peat")


def test_organic_blend_against_lawrence_and_slater_2008():
    """Lawrence and Slater (2008): organic soil porosity 0.9, |psi_s| 10.3 mm, b 2.7, solids
    heat capacity 2.5e6 J m-3 K-1, blended linearly. Pure organic soil gives those values; loam
    (Clapp and Hornberger 1978: 0.451, 478 mm, 5.39) at f = 0.25 gives
    porosity 0.75 * 0.451 + 0.25 * 0.9 = 0.56325, |psi_s| 0.75 * 0.478 + 0.25 * 0.0103 = 0.361075 m,
    b 0.75 * 5.39 + 0.25 * 2.7 = 4.7175, c_s 0.75 * 2.2e6 + 0.25 * 2.5e6 = 2.275e6."""
    (por, psi, b), cs = blend_organic(Hydraulics(*LOAM), 2.2e6, 1.0)
    assert (float(por), float(psi), float(b), float(cs)) == pytest.approx((0.9, 0.0103, 2.7, 2.5e6))
    (por, psi, b), cs = blend_organic(Hydraulics(*LOAM), 2.2e6, 0.25)
    assert (float(por), float(psi), float(b), float(cs)) == pytest.approx((0.56325, 0.361075, 4.7175, 2.275e6))
    (por, psi, b), cs = blend_organic(Hydraulics(*LOAM), 2.2e6, 0.0)
    assert (float(por), float(psi), float(b), float(cs)) == pytest.approx((*LOAM, 2.2e6))
    with pytest.raises(InputError, match="organic_fraction"):
        blend_organic(Hydraulics(*LOAM), 2.2e6, 1.5)


# =============================================================================================
# Edge cases found in review
# =============================================================================================

def test_liquid_above_porosity_freezes_down_to_the_capped_curve_just_below_freezing():
    """Niu and Yang's limit exceeds the porosity within a few mK of T_f and is capped there
    (theta_liq <= theta_s): 0.5 liquid cooled from 274.15 K to 273.149 K keeps 0.451 (loam
    porosity, Clapp and Hornberger 1978) and freezes 0.049, like the equilibrium rule."""
    r = run("temperature", 274.15, 0.5, 0.0, -1.001)
    assert r["liq"] == pytest.approx(0.451, abs=1e-12) and r["ice"] == pytest.approx(0.049, abs=1e-12)
    liq, ice = settle_one_sided(273.149, 0.5, 0.0, *LOAM)
    assert float(liq) == pytest.approx(0.451, abs=1e-12) and float(ice) == pytest.approx(0.049, abs=1e-12)


@pytest.mark.parametrize("rule", modes.PHASE_RULES)
def test_a_change_below_the_enthalpys_round_off_leaves_the_cell_as_it_is(rule):
    """dT = -1e-20 K on a state on the curve (a profile factor of 1e-26 deep down): nothing the
    solver can resolve, so the cell is returned bit-identical instead of being moved one float64
    step of T (which could go against the imposed sign)."""
    T0 = 258.4943359120343
    l0 = lmax(T0)
    r = run("energy", T0, l0, 0.3, -1e-20, rule=rule)
    assert r["T"] == T0 and r["liq"] == l0 and r["ice"] == 0.3
    assert r["frozen_kg_m2"] == 0 and r["melted_kg_m2"] == 0


def test_water_above_the_layer_volume_is_refused_by_the_modes():
    with pytest.raises(InputError, match="liquid water above 1 m3 m-3"):
        apply_energy_mode(270.0, 1e20, 0.1, -1.0, 0.1, *LOAM)


def test_one_sided_consistency_by_hand():
    """Loam, lmax(268.15) = 0.1188 (REFERENCES.md worked value, Niu and Yang 2006): 0.05 liquid
    with ice is consistent (stable for a one-sided model), 0.20 liquid is not; ice at 275 K is
    not; both phases at T_f are."""
    from initgen.science.soil.freezing import one_sided_consistent

    ok = one_sided_consistent([268.15, 268.15, 275.0, T_FREEZE], [0.05, 0.20, 0.1, 0.2], [0.25, 0.05, 0.1, 0.15],
                              *LOAM)
    assert ok.tolist() == [True, False, False, True]
