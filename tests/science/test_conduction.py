"""Johansen (1975) conductivity and the implicit conduction solver (the persistence estimate
that uses them: tests/engine/test_persistence.py).

Each check names its source: published measurements or handbook values, the analytic slab
solution of Carslaw and Jaeger (1959), or scipy as a reference library.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from initgen.science import conduction as c
from initgen.demo import INTERFACES
from initgen.engine.persistence import MAX_STEP_DAYS, STEPS_PER_INTERVAL

# de Vries (1963) constituents as tabulated in Moene and van Dam (2014), Table 2.2 (REFERENCES.md,
# confirmed): volumetric heat capacities, J m-3 K-1
C_QUARTZ, C_CLAY, C_WATER = 2.13e6, 2.39e6, 4.18e6


# ---------------------------------------------------------------------------------------------
# Johansen (1975)
# ---------------------------------------------------------------------------------------------


def _diffusivity(theta, porosity, quartz, c_solid, coarse):
    k = c.johansen_conductivity(theta, 0.0, porosity, quartz, coarse=coarse)
    return k / ((1.0 - porosity) * c_solid + theta * C_WATER)


def test_dry_sand_diffusivity_matches_de_vries():
    """Dry sand: thermal diffusivity 0.19e-6 m2 s-1 (de Vries 1963 data in Moene and van Dam 2014,
    Table 2.2, REFERENCES.md, confirmed); porosity 0.4 of that table's sand (recalled, not re-read);
    quartz 0.92 for sand (Peters-Lidard et al. 1998, re-read in a published parameter table)."""
    kappa = _diffusivity(0.0, 0.4, 0.92, C_QUARTZ, coarse=True)
    assert kappa == pytest.approx(0.19e-6, rel=0.05)


def test_moist_sand_diffusivity_matches_de_vries():
    """Sand at theta = 0.2: 0.99e-6 m2 s-1 (same table); Johansen's coarse Kersten relation."""
    kappa = _diffusivity(0.2, 0.4, 0.92, C_QUARTZ, coarse=True)
    assert kappa == pytest.approx(0.99e-6, rel=0.05)


def test_moist_clay_diffusivity_within_johansen_scatter():
    """Clay at theta = 0.2: 0.40e-6 m2 s-1 (same table). Johansen's method for fine soils scatters
    by about 20-25 % against measurements (Farouki 1981, recalled, not re-read): within 25 %."""
    kappa = _diffusivity(0.2, 0.4, 0.25, C_CLAY, coarse=False)
    assert kappa == pytest.approx(0.40e-6, rel=0.25)


def test_saturated_limits_are_water_and_ice_handbook_values():
    """At porosity -> 1 the saturated conductivity is that of the pore filling: liquid water
    0.561 W m-1 K-1 at 0 C and ice 2.22 W m-1 K-1 at 0 C (CRC Handbook of Chemistry and Physics,
    recalled, not re-read); Johansen's constants 0.57 and 2.2 are within 2 %."""
    assert c.saturated_conductivity(3.0, 1.0, 1.0) == pytest.approx(0.561, rel=0.02)
    assert c.saturated_conductivity(3.0, 1.0, 0.0) == pytest.approx(2.22, rel=0.02)
    # pure quartz solids: 7.7 W m-1 K-1 (Johansen 1975, as given by Peters-Lidard et al. 1998)
    assert c.solids_conductivity(1.0) == pytest.approx(7.7)


def test_dry_conductivity_formula_and_range():
    """k_dry = (0.135 gamma_d + 64.7) / (2700 - 0.947 gamma_d) (Johansen 1975; Peters-Lidard et al.
    1998, Eq. as re-read in published land-model code). Hand-computed for gamma_d = 1600 kg m-3:
    280.7 / 1184.8 = 0.2369."""
    assert c.dry_conductivity(1.0 - 1600.0 / 2700.0) == pytest.approx(280.7 / 1184.8, rel=1e-9)
    k = c.dry_conductivity(np.linspace(0.35, 0.55, 9))
    assert np.all(np.diff(k) < 0), "dry conductivity falls with porosity"


def test_kersten_numbers():
    """Ke = log10(Sr) + 1 (fine, unfrozen), 0.7 log10(Sr) + 1 (coarse), Sr (frozen) (Johansen 1975;
    Farouki 1981; Peters-Lidard et al. 1998)."""
    assert c.kersten_number(1.0) == pytest.approx(1.0)
    assert c.kersten_number(0.5) == pytest.approx(1.0 + np.log10(0.5))
    assert c.kersten_number(0.5, coarse=True) == pytest.approx(1.0 + 0.7 * np.log10(0.5))
    assert c.kersten_number(0.5, frozen=True) == pytest.approx(0.5)
    assert c.kersten_number(0.05) == 0.0 and c.kersten_number(0.04, coarse=True) == 0.0
    # moist soil lies between dry and saturated; saturated unfrozen equals k_sat
    k = c.johansen_conductivity(np.array([0.0, 0.2, 0.45]), 0.0, 0.45, 0.4)
    assert k[0] == pytest.approx(c.dry_conductivity(0.45))
    assert k[2] == pytest.approx(c.saturated_conductivity(c.solids_conductivity(0.4), 0.45, 1.0))
    assert k[0] < k[1] < k[2]


def test_frozen_soil_conducts_better_than_unfrozen():
    """Ice conducts about four times better than water (k_i 2.2 vs k_w 0.57, Johansen 1975):
    a saturated frozen soil conducts better than the same soil unfrozen."""
    assert c.johansen_conductivity(0.0, 0.4, 0.4, 0.4) > c.johansen_conductivity(0.4, 0.0, 0.4, 0.4)


# ---------------------------------------------------------------------------------------------
# The implicit solver
# ---------------------------------------------------------------------------------------------


def test_thomas_matches_scipy_solve_banded():
    """Vectorised Thomas algorithm against scipy.linalg.solve_banded (reference library)."""
    rng = np.random.default_rng(1)
    n, L = 7, 12
    lower, upper = -rng.uniform(0.1, 1, (n, L)), -rng.uniform(0.1, 1, (n, L))
    diag = 2.5 + rng.uniform(0, 1, (n, L))
    rhs = rng.normal(size=(n, L))
    x = c.thomas(lower, diag, upper, rhs.copy())
    for j in range(n):
        ab = np.zeros((3, L))
        ab[0, 1:], ab[1], ab[2, :-1] = upper[j, :-1], diag[j], lower[j, 1:]
        np.testing.assert_allclose(x[j], scipy.linalg.solve_banded((1, 1), ab, rhs[j]), rtol=1e-12)


KAPPA, CAP, DEPTH = 5.0e-7, 2.0e6, 1.0  # m2 s-1, J m-3 K-1, m


def _slab(nlayers, fourier, steps=400):
    dz = np.full(nlayers, DEPTH / nlayers)
    z = (np.arange(nlayers) + 0.5) * DEPTH / nlayers
    t = fourier * DEPTH ** 2 / KAPPA
    T = c.conduct(np.ones((1, nlayers)), dz, CAP, KAPPA * CAP, [t], steps_per_interval=steps)[0, 0]
    # our top face (z = 0) is held at 0 and the bottom insulated: x = l - z in Carslaw and Jaeger
    exact = c.slab_series(1.0 - z / DEPTH, fourier)
    return T, exact, (T * dz).sum() / DEPTH


@pytest.mark.parametrize("fourier", [0.05, 0.2, 0.5])
def test_slab_against_carslaw_and_jaeger_fine_layering(fourier):
    """Uniform initial temperature, one face at 0, the other insulated: Carslaw and Jaeger (1959),
    Section 3.3, T/T0 = sum 4 (-1)^n / ((2n+1) pi) cos((2n+1) pi x / 2l) exp(-kappa (2n+1)^2 pi^2
    t / 4l^2). 50 layers, 400 time steps: every node within 1 % of T0, the heat left within 1 %."""
    T, exact, heat = _slab(50, fourier)
    assert np.max(np.abs(T - exact)) < 0.01
    assert heat == pytest.approx(c.slab_series_heat(fourier), rel=0.01)


def test_slab_convergence_rate_on_coarse_layerings():
    """Coarse layerings converge to the Carslaw and Jaeger (1959) solution at about second order in
    the layer thickness (cell-centred finite volumes, Patankar 1980): the error of the heat left
    at Fo = 0.2 falls by a factor of about 4 per halving; the printed table shows the rate."""
    errs = {}
    for n in (4, 8, 16):
        _, _, heat = _slab(n, 0.2, steps=2000)
        errs[n] = abs(heat - c.slab_series_heat(0.2))
    rates = [np.log2(errs[a] / errs[b]) for a, b in ((4, 8), (8, 16))]
    print("layers, |heat error|:", {n: f"{e:.2e}" for n, e in errs.items()}, "observed orders:", rates)
    assert errs[4] > errs[8] > errs[16]
    assert min(rates) > 1.6


def test_energy_conserved_with_both_faces_insulated():
    """No flux through either face: the column heat sum(C dz T) is constant (conservation of
    energy; finite volumes conserve it to round-off)."""
    rng = np.random.default_rng(3)
    n, L = 50, 9
    dz = rng.uniform(0.02, 0.8, L)
    C = rng.uniform(1.0e6, 3.5e6, (n, L))
    k = rng.uniform(0.2, 3.0, (n, L))
    T0 = rng.normal(0, 2, (n, L))
    out = c.conduct(T0, dz, C, k, [86400.0, 30 * 86400.0, 365 * 86400.0], top="insulated", steps_per_interval=7)
    h0 = (C * dz * T0).sum(axis=1)
    for T in out:
        np.testing.assert_allclose((C * dz * T).sum(axis=1), h0, rtol=1e-10, atol=1e-6)
    # after a year the thin columns are near their heat-weighted mean temperature
    mean = h0 / (C * dz).sum(axis=1)
    assert np.max(np.abs(out[-1] - mean[:, None])) < np.max(np.abs(T0 - mean[:, None]))


@pytest.mark.parametrize("days", [(7, 15, 30, 60), (1, 2, 10, 90)])
def test_default_time_steps_are_accurate_enough(days):
    """The persistence estimate uses at least STEPS_PER_INTERVAL backward-Euler steps between
    horizons, each at most MAX_STEP_DAYS; on the demo's layers, against 1-minute steps, the heat
    fraction differs by less than 0.005 from a reference of 30- and 15-minute steps combined by
    Richardson extrapolation (second order; the first-order time error, measured)."""
    dz = np.diff(INTERFACES)
    z = 0.5 * (INTERFACES[1:] + INTERFACES[:-1])
    times = np.array(days) * 86400.0
    T0 = np.stack([np.ones(8), np.exp(-z / 0.05), np.exp(-z / 0.5)])
    coarse = c.conduct(T0, dz, 2.3e6, 1.4, times, min_steps=STEPS_PER_INTERVAL, max_step_s=MAX_STEP_DAYS * 86400.0)
    fine = 2 * c.conduct(T0, dz, 2.3e6, 1.4, times, max_step_s=900.0) - c.conduct(T0, dz, 2.3e6, 1.4, times,
                                                                                  max_step_s=1800.0)
    h = lambda o: (o * dz).sum(axis=2) / (T0 * dz).sum(axis=1)  # noqa: E731
    assert np.max(np.abs(h(coarse) - h(fine))) < 0.005
