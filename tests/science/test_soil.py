"""Tests of initgen.science.soil: published values, a worked example, and property tests.

Source labels beside each check:
- "Clapp and Hornberger 1978, Table 2 (confirmed)", "Cosby et al. 1984, Table 4/5 (confirmed)",
  "Niu and Yang 2006 (confirmed form)": as listed in design/REFERENCES.md.
- "REFERENCES.md worked value": a value computed from the published formula and written in
  REFERENCES.md.
- "computed by hand": arithmetic from the published formula, written out beside the check
  (calculator arithmetic, independent of initgen's code).
- "recalled from memory": not re-read in a published text.
Constants are the CESM shr_const_mod set (see initgen.science.constants).
"""

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from initgen.science.soil import properties
from initgen.science.soil import conversion
from initgen.science.soil.modes import apply_energy_mode
from initgen.science.soil.modes import apply_temperature_mode
from initgen.science.soil.limits import clamp
from initgen.science.soil.limits import clamp_snow_temperature
from initgen.science.soil.limits import clamp_soil_temperature
from initgen.science.soil.properties import cosby_1984
from initgen.science.soil.freezing import disequilibrium
from initgen.science.soil.properties import enthalpy
from initgen.science.soil.freezing import equilibrate_phase
from initgen.science.soil.properties import heat_capacity
from initgen.science.soil.properties import hydraulics_from_texture
from initgen.science.soil.conversion import kelvin_to_units
from initgen.science.soil.properties import soil_solid_heat_capacity
from initgen.science.soil.solver import solve_enthalpy
from initgen.science.soil.freezing import supercooled_liquid_max
from initgen.science.soil.conversion import temperature_to_kelvin
from initgen.science.soil.conversion import volumetric_to_water
from initgen.science.soil.conversion import water_to_volumetric
from initgen.science import blocks
from initgen.science.constants import CV_SOLID_DEFAULT, LATENT_HEAT_FUSION, RHO_WATER, T_FREEZE
from initgen.errors import InputError

PROP = settings(max_examples=1000, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow])

LOAM = hydraulics_from_texture("loam")


# =============================================================================================
# Unit conversion
# =============================================================================================

@pytest.mark.parametrize("units", ["K", "kelvin", "Kelvin", "degK", "deg_K", "degree_K",
                                   "degrees_K", " K "])
def test_kelvin_spellings(units):
    # UDUNITS-2 aliases of kelvin (recalled from memory)
    assert temperature_to_kelvin([250.0], units, "TSOIL")[0] == 250.0
    assert kelvin_to_units([250.0], units)[0] == 250.0


@pytest.mark.parametrize("units", ["degC", "deg_C", "degree_C", "degrees_C", "degree_Celsius",
                                   "degrees_Celsius", "Celsius", "celsius", "C", "°C", "deg C"])
def test_celsius_spellings(units):
    # t/degC = T/K - 273.15 (definition of the Celsius scale; SI Brochure, recalled from memory)
    assert temperature_to_kelvin(-3.5, units, "TSOIL") == pytest.approx(269.65, abs=1e-12)
    assert kelvin_to_units(269.65, units) == pytest.approx(-3.5, abs=1e-12)


@pytest.mark.parametrize("units", ["degF", "Fahrenheit", "", None, "W m-2"])
def test_unknown_temperature_units_name_the_variable(units):
    with pytest.raises(InputError, match="TSOIL"):
        temperature_to_kelvin(1.0, units, "TSOIL")
    with pytest.raises(InputError):
        kelvin_to_units(1.0, units)


@pytest.mark.parametrize("units", ["kg m-2", "kg/m2", "kg m**-2", "kg m^-2", "kg/m^2", "KG M-2",
                                   "mm"])
def test_mass_units(units):
    # computed by hand: 10 kg m-2 in a 0.1 m layer = 10 / (1000 * 0.1) = 0.1 m3 m-3
    v = water_to_volumetric(10.0, units, 0.1, name="H2OSOI_LIQ")
    assert v == pytest.approx(0.1, rel=1e-14)
    assert volumetric_to_water(v, units, 0.1) == pytest.approx(10.0, rel=1e-14)


@pytest.mark.parametrize("units", ["m3 m-3", "1", "m3/m3", "fraction", "m3 m**-3", "m^3 m^-3"])
def test_volumetric_units(units):
    assert water_to_volumetric(0.23, units, 0.1) == 0.23
    assert volumetric_to_water(0.23, units, 0.1) == 0.23


def test_saturation_fraction():
    # computed by hand: 0.5 of saturation with porosity 0.4 = 0.2 m3 m-3
    assert conversion.SATURATION_FRACTION == "saturation_fraction"
    v = water_to_volumetric(0.5, "saturation_fraction", 0.1, porosity=0.4, name="sthu")
    assert v == pytest.approx(0.2, rel=1e-14)
    assert volumetric_to_water(v, "saturation_fraction", 0.1, porosity=0.4) == pytest.approx(0.5)
    with pytest.raises(InputError, match="sthu.*porosity"):
        water_to_volumetric(0.5, "saturation_fraction", 0.1, name="sthu")
    with pytest.raises(InputError, match="porosity"):
        water_to_volumetric(0.5, "saturation_fraction", 0.1, porosity=1.5, name="sthu")


def test_water_unit_errors_name_the_variable():
    with pytest.raises(InputError, match="SMC"):
        water_to_volumetric(0.3, "percent", 0.1, name="SMC")
    with pytest.raises(InputError, match="SMC.*thickness"):
        water_to_volumetric(3.0, "kg m-2", [0.1, 0.0], name="SMC")
    with pytest.raises(InputError):
        volumetric_to_water(0.3, "g", 0.1)


def test_mass_conversion_broadcasts_over_layers():
    dz = np.array([0.1, 0.3])[:, None]
    kg = np.array([[10.0, 20.0, 30.0]])
    v = water_to_volumetric(kg, "kg m-2", dz)
    assert v.shape == (2, 3)
    np.testing.assert_allclose(volumetric_to_water(v, "kg m-2", dz), np.broadcast_to(kg, (2, 3)))


# =============================================================================================
# Hydraulic parameters
# =============================================================================================

@pytest.mark.parametrize(
    "texture, b, psi_cm, porosity, k_cm_min",
    [  # Clapp and Hornberger 1978, Table 2 (confirmed), all eleven classes
        ("sand", 4.05, 12.1, 0.395, 1.056),
        ("loamy sand", 4.38, 9.0, 0.410, 0.938),
        ("sandy loam", 4.90, 21.8, 0.435, 0.208),
        ("silt loam", 5.30, 78.6, 0.485, 0.0432),
        ("loam", 5.39, 47.8, 0.451, 0.0417),
        ("sandy clay loam", 7.12, 29.9, 0.420, 0.0378),
        ("silty clay loam", 7.75, 35.6, 0.477, 0.0102),
        ("clay loam", 8.52, 63.0, 0.476, 0.0147),
        ("sandy clay", 10.4, 15.3, 0.426, 0.0130),
        ("silty clay", 10.4, 49.0, 0.492, 0.0062),
        ("clay", 11.4, 40.5, 0.482, 0.0077),
    ],
)
def test_clapp_hornberger_table(texture, b, psi_cm, porosity, k_cm_min):
    row = properties.CLAPP_HORNBERGER_1978[texture]
    assert (row.b, row.psi_sat_cm, row.porosity, row.k_sat_cm_min) == (b, psi_cm, porosity, k_cm_min)
    assert row.psi_sat_m == pytest.approx(psi_cm / 100.0)          # cm -> m
    assert row.k_sat_m_s == pytest.approx(k_cm_min / 100.0 / 60.0)  # cm/min -> m/s
    h = hydraulics_from_texture(texture)
    assert h == (porosity, pytest.approx(psi_cm / 100.0), b)


def test_clapp_hornberger_conversions_by_hand():
    # computed by hand: loam psi_s 47.8 cm = 0.478 m; sand K_s 1.056 cm/min = 1.76e-4 m/s
    assert properties.CLAPP_HORNBERGER_1978["loam"].psi_sat_m == pytest.approx(0.478, rel=1e-12)
    assert properties.CLAPP_HORNBERGER_1978["sand"].k_sat_m_s == pytest.approx(1.76e-4, rel=1e-12)


def test_texture_names_are_forgiving_and_errors_list_classes():
    assert hydraulics_from_texture("Silty_Clay-Loam") == hydraulics_from_texture("silty clay loam")
    with pytest.raises(InputError, match="loamy silt.*sandy loam"):
        hydraulics_from_texture("loamy silt")


@pytest.mark.parametrize(
    "sand, clay, porosity, b, psi_mm",
    [
        # computed by hand from Cosby et al. 1984, Table 5 (confirmed regressions):
        # sand 40, clay 20: 0.489 - 0.00126*40 = 0.4386; 2.91 + 0.159*20 = 6.09;
        #   10 * 10**(1.88 - 0.0131*40) = 10 * 10**1.356 = 10 * 22.699 = 226.99 mm
        (40.0, 20.0, 0.4386, 6.09, 226.99),
        # sand 80, clay 5: 0.489 - 0.1008 = 0.3882; 2.91 + 0.795 = 3.705;
        #   10 * 10**(1.88 - 1.048) = 10 * 10**0.832 = 10 * 6.7920 = 67.920 mm
        (80.0, 5.0, 0.3882, 3.705, 67.920),
    ],
)
def test_cosby_table5_by_hand(sand, clay, porosity, b, psi_mm):
    h = cosby_1984(sand, clay)
    assert h.porosity == pytest.approx(porosity, abs=1e-12)
    assert h.b == pytest.approx(b, abs=1e-12)
    assert h.psi_sat_m == pytest.approx(psi_mm / 1000.0, rel=1e-4)   # mm -> m, positive suction


def test_cosby_table4_by_hand():
    # computed by hand from Cosby et al. 1984, Table 4 (confirmed), sand 40, clay 20, silt 40:
    # 0.505 - 0.00142*40 - 0.00037*20 = 0.4408; 3.10 + 0.157*20 - 0.003*40 = 6.12;
    # 10 * 10**(1.54 - 0.0095*40 + 0.0063*40) = 10 * 10**1.412 = 10 * 25.823 = 258.23 mm
    h = cosby_1984(40.0, 20.0, table=4)
    assert h.porosity == pytest.approx(0.4408, abs=1e-12)
    assert h.b == pytest.approx(6.12, abs=1e-12)
    assert h.psi_sat_m == pytest.approx(0.25823, rel=1e-4)
    assert cosby_1984(40.0, 20.0, silt_pct=40.0, table=4) == h


def test_cosby_vectorised_and_errors():
    h = cosby_1984(np.array([40.0, 80.0]), np.array([20.0, 5.0]))
    assert h.porosity.shape == (2,)
    for bad in [dict(sand_pct=-1, clay_pct=10), dict(sand_pct=70, clay_pct=40),
                dict(sand_pct=40, clay_pct=20, table=3)]:
        with pytest.raises(InputError):
            cosby_1984(**bad)


# =============================================================================================
# Freezing curve, heat capacity, enthalpy
# =============================================================================================

def test_niu_yang_worked_value_loam():
    # REFERENCES.md worked value (Niu and Yang 2006 form): loam of Clapp and Hornberger,
    # b 5.39, |psi_s| 0.478 m, theta_s 0.451, T = 268.15 K -> theta_liq_max = 0.1188
    assert supercooled_liquid_max(268.15, 0.451, 0.478, 5.39) == pytest.approx(0.1188, abs=5e-5)
    # suction sign convention does not matter
    assert supercooled_liquid_max(268.15, 0.451, -0.478, 5.39) == pytest.approx(0.1188, abs=5e-5)


def test_niu_yang_sand_by_hand():
    # computed by hand (Niu and Yang 2006 formula), Clapp-Hornberger sand at 263.15 K:
    # x = 3.337e5 * 10 / (9.80616 * 263.15 * 0.121) = 3.337e6 / 312.24 = 10687.3
    # theta = 0.395 * 10687.3**(-1/4.05) = 0.395 * exp(-9.27681 / 4.05) = 0.395 * 0.10121 = 0.03998
    assert supercooled_liquid_max(263.15, 0.395, 0.121, 4.05) == pytest.approx(0.03998, abs=2e-5)


def test_supercooled_limit_at_and_above_freezing_is_porosity():
    T = np.array([T_FREEZE - 1e-4, T_FREEZE, 280.0, 320.0])
    lim = supercooled_liquid_max(T, 0.451, 0.478, 5.39)
    np.testing.assert_array_equal(lim, 0.451)   # capped just below T_f; porosity at/above


def test_supercooled_limit_increases_with_temperature():
    T = np.linspace(200.0, 273.14, 500)
    lim = supercooled_liquid_max(T, 0.451, 0.478, 5.39)
    assert np.all(np.diff(lim) > 0)


def test_heat_capacity_texture_and_default():
    # REFERENCES.md texture formula: pure sand 2.128e6, pure clay 2.385e6 J m-3 K-1
    assert soil_solid_heat_capacity(100.0, 0.0) == pytest.approx(2.128e6)
    assert soil_solid_heat_capacity(0.0, 100.0) == pytest.approx(2.385e6)
    # computed by hand: 30 % sand, 10 % clay: (2.128*30 + 2.385*10)/40 e6 = 2.19225e6
    assert soil_solid_heat_capacity(30.0, 10.0) == pytest.approx(2.19225e6, rel=1e-12)
    # dry soil, porosity 0.4, default solids: 0.6 * 2.2565e6 = 1.3539e6 (computed by hand)
    assert heat_capacity(0.0, 0.0, 0.4) == pytest.approx(1.3539e6, rel=1e-12)
    assert heat_capacity(0.0, 0.0, 0.4, sand_pct=100, clay_pct=0) == pytest.approx(0.6 * 2.128e6)
    with pytest.raises(InputError):
        heat_capacity(0.1, 0.0, 0.4, c_solid=2e6, sand_pct=50, clay_pct=10)
    with pytest.raises(InputError):
        heat_capacity(0.1, 0.0, 0.4, sand_pct=50)
    with pytest.raises(InputError, match="silt"):
        soil_solid_heat_capacity(0.0, 0.0)


def test_heat_capacity_de_vries_mixing():
    # de Vries 1963 mixing (constituents from Moene and van Dam 2014, Table 2.2, confirmed):
    # quartz soil, porosity 0.4, theta 0.2: 0.6*2.13e6 + 0.2*4.18e6 = 2.114e6 J m-3 K-1
    # (computed by hand); initgen uses the CESM water value 4.188e6, so agreement is to 0.1 %.
    assert heat_capacity(0.2, 0.0, 0.4, c_solid=2.13e6) == pytest.approx(2.114e6, rel=1e-3)
    # ice as liquid-water equivalent: 0.2 m3 m-3 of water frozen -> 0.2 * 1000 * 2117.27 =
    # 423 454 J m-3 K-1 (= true ice volume 0.2*1000/917 times 917*2117.27; computed by hand)
    ice_part = heat_capacity(0.0, 0.2, 0.4, c_solid=0.0)
    assert ice_part == pytest.approx(423454.0, rel=1e-12)


def test_enthalpy_reference_state():
    # all water frozen at T_f -> H = 0 (the documented reference)
    assert enthalpy(T_FREEZE, 0.0, 0.3, 0.1, 0.45) == 0.0
    # all liquid at T_f -> rho_w L_f theta dz = 1000 * 3.337e5 * 0.3 * 0.1 = 1.0011e7 J m-2
    assert enthalpy(T_FREEZE, 0.3, 0.0, 0.1, 0.45) == pytest.approx(1.0011e7, rel=1e-12)
    # fixed phase: linear in T with slope C dz
    C = heat_capacity(0.1, 0.2, 0.45)
    dH = enthalpy(260.0, 0.1, 0.2, 0.1, 0.45) - enthalpy(250.0, 0.1, 0.2, 0.1, 0.45)
    assert dH == pytest.approx(C * 10.0 * 0.1, rel=1e-12)


# =============================================================================================
# Worked examples
# =============================================================================================

def test_worked_example_loam_energy_mode():
    """Loam (Clapp and Hornberger 1978: theta_s 0.451, |psi_s| 0.478 m, b 5.39), layer
    dz = 0.1 m, liquid 0.30 m3 m-3, no ice, T0 = 274.0 K, cooled by 5 K in energy mode.
    Solids: default c_s = 2.2565e6 J m-3 K-1. All arithmetic below computed by hand
    (calculator), from the formulas in initgen.science.soil's docstrings and the CESM constants.

    1. Heat capacity of the starting state (de Vries 1963 mixing):
       C0 = (1 - 0.451) * 2.2565e6 + 0.30 * 1000 * 4188
          = 1 238 818.5 + 1 256 400 = 2 495 218.5 J m-3 K-1
    2. Energy change: dH = C0 * dT * dz = 2 495 218.5 * (-5) * 0.1 = -1 247 609.25 J m-2
    3. Starting enthalpy (reference: all water frozen at 273.15 K):
       H0 = C0 (T0 - T_f) dz + rho_w L_f theta dz
          = 2 495 218.5 * 0.85 * 0.1 + 1000 * 3.337e5 * 0.30 * 0.1
          = 212 093.57 + 10 011 000 = 10 223 093.57 J m-2
       Target H1 = H0 + dH = 8 975 484.32 J m-2, i.e. h1 = H1 / dz = 89 754 843.2 J m-3.
    4. Which branch? All liquid at T_f would be L W = 3.337e8 * 0.30 = 1.0011e8 J m-3 > h1,
       so the layer ends below freezing. The curve reaches W = 0.30 (the kink) where
       x_k = (0.30 / 0.451)^(-5.39) = exp(5.39 * 0.407685) = 9.0018 and
       s_k = T_f g psi x_k / (L_f + g psi x_k) = 273.15 * 42.195 / 333 742.2 = 0.034534 K;
       h at the kink = 1.0011e8 - 2 495 218.5 * 0.034534 = 100 023 831 J m-3 > h1, so water
       freezes and the state lies on the Niu-Yang curve.
    5. On the curve, with s = T_f - T, K = (1 - 0.451) 2.2565e6 + 0.30 * 1000 * 2117.27
       = 1 873 999.5 J m-3 K-1 (all water counted as ice) and dC = 1000 (4188 - 2117.27)
       = 2 070 730 J m-3 K-1:
          l(s) = 0.451 * [3.337e5 s / (9.80616 (273.15 - s) 0.478)]^(-1/5.39)
          h(s) = -K s + l(s) (3.337e8 - dC s)
       s = 0.05 K: x = 13.0340, l = 0.280090, h = 93 343 327 J m-3 (too warm)
       s = 0.07 K: x = 18.2489, l = 0.263136, h = 87 639 253 J m-3 (too cold)
       secant: s = 0.062582 -> h = 89 500 858; s = 0.061570 -> h = 89 774 866;
               s = 0.0616441 -> h = 89 754 664; s = 0.0616434 -> h = 89 754 843 = h1.
    6. Result: T1 = 273.15 - 0.0616434 = 273.08836 K; liquid l = 0.269418 m3 m-3;
       ice = 0.30 - 0.269418 = 0.030582 m3 m-3, i.e. 0.030582 * 1000 * 0.1 = 3.0582 kg m-2
       frozen. Latent = 3.337e8 * (-0.030582) * 0.1 = -1 020 525 J m-2; sensible =
       dH - latent = -227 085 J m-2. The layer cooled by only 0.91 K, not 5 K: 82 % of the
       energy went into freezing.
    """
    r = apply_energy_mode(274.0, 0.30, 0.0, -5.0, 0.1, *LOAM)
    assert heat_capacity(0.30, 0.0, 0.451) == pytest.approx(2495218.5, rel=1e-12)
    assert float(r.T) == pytest.approx(273.08836, abs=2e-5)
    assert float(r.liq) == pytest.approx(0.269418, abs=2e-6)
    assert float(r.ice) == pytest.approx(0.030582, abs=2e-6)
    assert float(r.frozen_kg_m2) == pytest.approx(3.0582, abs=2e-4)
    assert float(r.melted_kg_m2) == 0.0
    assert float(r.latent_J_m2) == pytest.approx(-1020525.0, abs=2.0)
    assert float(r.sensible_J_m2) == pytest.approx(-227085.0, abs=2.0)
    assert float(r.latent_J_m2 + r.sensible_J_m2) == pytest.approx(-1247609.25, rel=1e-9)


def test_worked_example_loam_temperature_mode():
    """Same layer in temperature mode: T1 = 274.0 - 5 = 269.0 K exactly, and the liquid drops
    to the supercooled limit (computed by hand, Niu and Yang 2006 formula):
    x = 3.337e5 * 4.15 / (9.80616 * 269.0 * 0.478) = 1 384 855 / 1260.90 = 1098.31;
    l = 0.451 * exp(-ln(1098.31) / 5.39) = 0.451 * exp(-1.29898) = 0.451 * 0.27281 = 0.12304.
    Ice = 0.30 - 0.12304 = 0.17696 m3 m-3, i.e. 17.696 kg m-2 frozen; compare 3.06 kg m-2 in
    energy mode for the same dT."""
    r = apply_temperature_mode(274.0, 0.30, 0.0, -5.0, 0.1, *LOAM)
    assert float(r.T) == 269.0
    assert float(r.liq) == pytest.approx(0.12304, abs=2e-5)
    assert float(r.frozen_kg_m2) == pytest.approx(17.696, abs=2e-3)


# =============================================================================================
# Property tests (hypothesis, 1000 examples each)
# =============================================================================================

@st.composite
def states(draw, equilibrium=None):
    """A soil layer state and an anomaly. Starting states are in phase equilibrium, or
    (when ``equilibrium`` is False or drawn so) an arbitrary liquid/ice split."""
    phi = draw(st.floats(0.30, 0.60))
    psi = draw(st.floats(0.03, 0.80))
    b = draw(st.floats(3.0, 12.0))
    cs = draw(st.floats(1.9e6, 2.5e6))
    dz = draw(st.floats(0.01, 2.0))
    W = phi * draw(st.one_of(st.just(0.0), st.just(1.0), st.floats(0.0, 1.05)))
    T = draw(st.one_of(st.just(T_FREEZE), st.floats(230.0, 300.0)))
    eq = draw(st.booleans()) if equilibrium is None else equilibrium
    if eq:
        liq, ice = equilibrate_phase(T, W, 0.0, phi, psi, b)
        liq, ice = float(liq), float(ice)
    else:
        f = draw(st.floats(0.0, 1.0))
        liq, ice = W * f, W * (1.0 - f)
    dT = draw(st.one_of(st.floats(-15.0, -1e-3), st.floats(1e-3, 15.0)))
    return dict(T=T, liq=liq, ice=ice, dT=dT, dz=dz, phi=phi, psi=psi, b=b, cs=cs)


def _run(mode, s):
    """The equilibrium rule (the change-driven default has its own properties in
    tests/science/test_phase_rules.py)."""
    fn = apply_energy_mode if mode == "energy" else apply_temperature_mode
    return fn(s["T"], s["liq"], s["ice"], s["dT"], s["dz"], s["phi"], s["psi"], s["b"], s["cs"], rule="equilibrium")


MODES = ("energy", "temperature")


@PROP
@given(s=states())
def test_property_water_mass_conserved(s):
    for mode in MODES:
        r = _run(mode, s)
        before = RHO_WATER * (s["liq"] + s["ice"]) * s["dz"]
        after = RHO_WATER * (float(r.liq) + float(r.ice)) * s["dz"]
        assert abs(after - before) <= 1e-9 * before, mode
        assert r.liq >= 0 and r.ice >= 0, mode
        # the frozen/melted ledger matches the phase change from the diagnosed start
        liq0, _ = equilibrate_phase(s["T"], s["liq"], s["ice"], s["phi"], s["psi"], s["b"])
        dm = float(r.melted_kg_m2 - r.frozen_kg_m2)
        assert abs(dm - RHO_WATER * (float(r.liq) - float(liq0)) * s["dz"]) <= 1e-9, mode


@PROP
@given(s=states())
def test_property_energy_mode_enthalpy_change_equals_target(s):
    r = _run("energy", s)
    # the equilibrium rule starts from the split a diagnosing model sees at T0
    liq, ice = equilibrate_phase(s["T"], s["liq"], s["ice"], s["phi"], s["psi"], s["b"])
    target = heat_capacity(liq, ice, s["phi"], s["cs"]) * s["dT"] * s["dz"]
    H0 = enthalpy(s["T"], liq, ice, s["dz"], s["phi"], s["cs"])
    H1 = enthalpy(r.T, r.liq, r.ice, s["dz"], s["phi"], s["cs"])
    assert abs((H1 - H0) - target) <= 1e-6 * abs(target)
    assert abs(float(r.sensible_J_m2 + r.latent_J_m2) - target) <= 1e-6 * abs(target)


@PROP
@given(s=states())
def test_property_liquid_never_exceeds_supercooled_limit(s):
    for mode in MODES:
        r = _run(mode, s)
        if r.T < T_FREEZE:
            assert r.liq <= supercooled_liquid_max(r.T, s["phi"], s["psi"], s["b"]), mode


@PROP
@given(s=states())
def test_property_no_ice_above_freezing(s):
    for mode in MODES:
        r = _run(mode, s)
        if r.T > T_FREEZE:
            assert r.ice == 0.0, mode
        # and the new state is in phase equilibrium, to 1e-9 m3 m-3: near T_f one float64
        # step of T (5.7e-14 K) moves the curve by up to ~1e-10 (see solve_enthalpy)
        assert not disequilibrium(r.T, r.liq, r.ice, s["phi"], s["psi"], s["b"], tol=1e-9)


@PROP
@given(s=states(equilibrium=True), dz=st.floats(0.01, 2.0))
def test_property_solve_enthalpy_round_trip(s, dz):
    """solve_enthalpy(enthalpy(state)) returns the state, for states on the freezing curve."""
    T0 = s["T"] + s["dT"]                 # any temperature; put the water on the curve there
    liq, ice = equilibrate_phase(T0, s["liq"], s["ice"], s["phi"], s["psi"], s["b"])
    H = enthalpy(T0, liq, ice, dz, s["phi"], s["cs"])
    T, l2, i2 = solve_enthalpy(H, liq + ice, dz, s["phi"], s["psi"], s["b"], s["cs"])
    assert abs(float(T) - T0) <= 1e-8
    assert abs(float(l2) - float(liq)) <= 1e-9   # one float64 step of T near T_f (solve_enthalpy)


# =============================================================================================
# Vectorisation, blocks, missing values, validation
# =============================================================================================

def _random_field(shape, seed=3):
    rng = np.random.default_rng(seed)
    phi = rng.uniform(0.35, 0.5, shape[1:])[None]
    psi = rng.uniform(0.05, 0.7, shape[1:])[None]
    b = rng.uniform(4, 11, shape[1:])[None]
    dz = np.linspace(0.05, 1.0, shape[0])[:, None]
    T = rng.uniform(255, 285, shape)
    W = rng.uniform(0, 1, shape) * phi
    liq, ice = equilibrate_phase(T, W, 0, phi, psi, b)
    dT = rng.uniform(-6, 6, shape)
    dT[:, ::7] = 0.0
    return T, liq, ice, dT, dz, phi, psi, b, 2.2e6


@pytest.mark.parametrize("mode", [apply_energy_mode, apply_temperature_mode])
def test_broadcast_matches_cell_by_cell(mode):
    args = _random_field((4, 13))
    r = mode(*args)
    assert all(a.shape == (4, 13) for a in r)
    T, liq, ice, dT, dz, phi, psi, b, cs = args
    for (k, j) in [(0, 0), (1, 5), (3, 12), (2, 7)]:
        one = mode(T[k, j], liq[k, j], ice[k, j], dT[k, j], dz[k, 0], phi[0, j], psi[0, j], b[0, j], cs)
        for a, o in zip(r, one):
            assert a[k, j] == pytest.approx(float(o), rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("mode", [apply_energy_mode, apply_temperature_mode])
def test_results_do_not_depend_on_block_size(mode, monkeypatch):
    args = _random_field((5, 400))
    ref = mode(*args)
    monkeypatch.setattr(blocks, "SOIL_BLOCK_ELEMENTS", 37)
    small = mode(*args)
    for a, c in zip(ref, small):
        np.testing.assert_array_equal(a, c)


def test_energy_mode_vectorised_conservation():
    T, liq, ice, dT, dz, phi, psi, b, cs = _random_field((6, 2000), seed=11)
    r = apply_energy_mode(T, liq, ice, dT, dz, phi, psi, b, cs)
    target = heat_capacity(liq, ice, phi, cs) * dT * dz
    dH = enthalpy(r.T, r.liq, r.ice, dz, phi, cs) - enthalpy(T, liq, ice, dz, phi, cs)
    touched = dT != 0
    assert np.all(np.abs(dH - target)[touched] <= 1e-6 * np.abs(target)[touched])
    np.testing.assert_allclose(r.liq + r.ice, liq + ice, rtol=1e-12, atol=0)
    assert np.all(r.T[~touched] == T[~touched])


def test_zero_anomaly_leaves_cells_bit_identical_and_direction_follows_dt():
    """Over 200 000 random cells (equilibrium and disequilibrium starts): cells with dT == 0
    are returned bit-identical with zero ledger entries; from equilibrium starts the energy
    mode moves T in the direction of dT (H rises strictly with T along the freezing curve;
    T may stay at T_f on the latent plateau)."""
    rng = np.random.default_rng(20)
    n = 200_000
    phi = rng.uniform(0.3, 0.6, n)
    psi = rng.uniform(0.03, 0.8, n)
    b = rng.uniform(3, 12, n)
    T = rng.uniform(230, 300, n)
    T[::50] = T_FREEZE
    W = phi * rng.uniform(0, 1.05, n)
    f = rng.uniform(0, 1, n)
    eq = rng.uniform(0, 1, n) < 0.5
    liq_eq, ice_eq = equilibrate_phase(T, W, 0.0, phi, psi, b)
    liq = np.where(eq, liq_eq, W * f)
    ice = np.where(eq, ice_eq, W - liq)
    dT = rng.uniform(-15, 15, n)
    dT[rng.uniform(0, 1, n) < 0.2] = 0.0
    dz = rng.uniform(0.01, 2.0, n)
    for mode in (apply_energy_mode, apply_temperature_mode):
        r = mode(T, liq, ice, dT, dz, phi, psi, b, 2.2e6)
        z = dT == 0
        np.testing.assert_array_equal(r.T[z], T[z])
        np.testing.assert_array_equal(r.liq[z], liq[z])
        np.testing.assert_array_equal(r.ice[z], ice[z])
        for a in r[3:]:
            assert np.all(a[z] == 0.0)
        if mode is apply_energy_mode:
            assert np.all(((r.T - T) * dT)[eq] >= 0)


def test_missing_and_fill_cells_pass_through():
    """NaN temperature or anomaly, and fill values in cells with dT == 0, leave the cell as it
    was (no error, no warning, zero ledger); formulas propagate NaN."""
    T = np.array([np.nan, 270.0, 1e20, 270.0])
    liq = np.array([0.2, 0.2, -9999.0, 0.2])
    phi = np.array([0.45, 0.45, -9999.0, 0.45])
    dT = np.array([-1.0, -1.0, 0.0, np.nan])
    for mode in (apply_energy_mode, apply_temperature_mode):
        with np.errstate(all="raise"):
            r = mode(T, liq, 0.05, dT, 0.1, phi, 0.478, 5.39, rule="equilibrium")
        np.testing.assert_array_equal(r.T[[0, 2, 3]], T[[0, 2, 3]])
        np.testing.assert_array_equal(r.liq[[0, 2, 3]], liq[[0, 2, 3]])
        assert np.all(r.latent_J_m2[[0, 2, 3]] == 0) and np.all(r.frozen_kg_m2[[0, 2, 3]] == 0)
        assert r.T[1] != 270.0            # the valid cell was changed ...
        assert not disequilibrium(r.T[1], r.liq[1], r.ice[1], 0.45, 0.478, 5.39)
    assert np.isnan(supercooled_liquid_max(np.nan, 0.45, 0.478, 5.39))


def test_invalid_perturbed_cell_names_the_quantity_and_count():
    with pytest.raises(InputError, match="2 cell.*porosity"):
        apply_energy_mode(270.0, 0.2, 0.05, -1.0, 0.1, [0.45, np.nan, 1.5], 0.478, 5.39)
    with pytest.raises(InputError, match="1 cell.*<= 0 K.*units"):
        apply_temperature_mode([-5.0, 270.0], 0.2, 0.05, -1.0, 0.1, 0.45, 0.478, 5.39)


def test_scalars_give_zero_dimensional_arrays():
    r = apply_energy_mode(270.0, 0.1, 0.1, 1.0, 0.1, *LOAM)
    assert all(isinstance(a, np.ndarray) and a.shape == () for a in r)
    T, liq, ice = solve_enthalpy(1e6, 0.2, 0.1, *LOAM)
    assert T.shape == liq.shape == ice.shape == ()


def test_dry_soil_is_pure_sensible():
    r = apply_energy_mode(270.0, 0.0, 0.0, -4.0, 0.1, *LOAM)
    assert float(r.T) == pytest.approx(266.0, abs=1e-9)
    assert float(r.latent_J_m2) == 0.0


def test_oversaturated_layer_sits_on_the_latent_plateau():
    # W = 0.5 > porosity 0.451: at T_f the layer may hold ice with liq >= porosity
    H = RHO_WATER * LATENT_HEAT_FUSION * 0.47 * 0.1   # h between L*phi and L*W
    T, liq, ice = solve_enthalpy(H, 0.5, 0.1, *LOAM)
    assert float(T) == T_FREEZE
    assert float(liq) == pytest.approx(0.47, rel=1e-12)
    assert float(ice) == pytest.approx(0.03, rel=1e-9)
    assert not disequilibrium(T, liq, ice, *LOAM)


@pytest.mark.parametrize("kw, match", [
    (dict(dz=0.0), "dz"),
    (dict(porosity=1.2), "porosity"),
    (dict(b=-1.0), "Clapp-Hornberger b"),
    (dict(liq=-0.01), "negative"),
    (dict(psi_sat_m=0.0), "psi_sat_m"),
])
def test_mode_validation(kw, match):
    args = dict(T=270.0, liq=0.2, ice=0.05, dT_target=-1.0, dz=0.1, porosity=0.45,
                psi_sat_m=0.3, b=5.0)
    args.update(kw)
    with pytest.raises(InputError, match=match):
        apply_energy_mode(**args)


# =============================================================================================
# Disequilibrium and clamps
# =============================================================================================

def test_disequilibrium_flags():
    phi, psi, b = LOAM
    T = np.array([280.0, 268.15, 268.15, 268.15, 268.15, T_FREEZE])
    liq = np.array([0.2, 0.30, 0.1188, 0.05, 0.05, 0.451])
    ice = np.array([0.1, 0.0, 0.10, 0.20, 0.0, 0.02])
    flags = disequilibrium(T, liq, ice, phi, psi, b)
    # ice above freezing; liquid above the limit (0.1188, REFERENCES.md); equilibrium;
    # ice with liquid below the limit; all water liquid below the limit (fine); plateau
    assert flags.tolist() == [True, True, False, True, False, False]


def test_clamp_soil_temperature_counts():
    T, n_low, n_high = clamp_soil_temperature([170.0, 250.0, 350.0, 360.0, np.nan])
    assert (n_low, n_high) == (1, 2)
    np.testing.assert_array_equal(T[:4], [180.0, 250.0, 340.0, 340.0])
    assert np.isnan(T[4])
    T, n_low, n_high = clamp_soil_temperature([170.0], t_min=100.0)
    assert n_low == n_high == 0 and T[0] == 170.0


def test_clamp_snow_temperature():
    T, n = clamp_snow_temperature([260.0, 273.15, 275.0])
    assert n == 1 and T.tolist() == [260.0, 273.15, 273.15]


def test_clamp_generic():
    v, n = clamp([1.0, 5.0, 9.0], 2.0, 8.0)
    assert n == 2 and v.tolist() == [2.0, 5.0, 8.0]
    v, n = clamp([1.0], None, None)
    assert n == 0 and v.tolist() == [1.0]


def test_supercooled_docstring_example():
    # keeps the Examples section of supercooled_liquid_max honest
    assert round(float(supercooled_liquid_max(268.15, 0.451, 0.478, 5.39)), 4) == 0.1188


def test_reference_constants_used():
    # the latent term uses L_f = 3.337e5 J/kg and rho_w = 1000 (CESM set, confirmed)
    assert enthalpy(T_FREEZE, 1.0, 0.0, 1.0, 0.5, c_solid=0.0) == pytest.approx(3.337e8)
    assert CV_SOLID_DEFAULT == 2.2565e6
    assert math.isclose(LATENT_HEAT_FUSION, 3.337e5)
