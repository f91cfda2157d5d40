"""Soil physics (this package) for perturbing a soil temperature: heat capacity, enthalpy, freezing curve,
phase repartition and physical limits. Pure numpy, vectorised, float64, no file I/O.

Conventions (read these first)
------------------------------
Water contents
    Inside the physics every water content is **volumetric, m3 m-3**. Soil ice is expressed as
    its **liquid-water equivalent**: ``theta_ice`` = ice mass per unit soil volume / RHO_WATER.
    This is how most restart files store ice (kg m-2, or a volumetric total that includes ice
    as water), so :func:`water_to_volumetric` uses RHO_WATER for liquid and ice alike, and
    phase change conserves ``theta_liq + theta_ice`` exactly: the water mass of a layer is
    ``RHO_WATER * (theta_liq + theta_ice) * dz``. The true ice volume is
    ``theta_ice * RHO_WATER / RHO_ICE``; the heat capacity uses it (see :func:`heat_capacity`).
    The pore-space limit ``theta_liq + theta_ice <= porosity`` is applied to the
    water-equivalent contents; the 9 % expansion of freezing water is not modelled.
Temperatures
    Kelvin inside the physics.
Enthalpy reference state
    H = 0 for soil whose water is **all frozen at T_f = 273.15 K**:
    ``H = C(theta_liq, theta_ice) * (T - T_f) * dz + RHO_WATER * L_f * theta_liq * dz`` (J m-2).
    The solvers, :func:`energy_of_change` and the tests all use this one function.
Phase rules (``rule=`` of the two modes; recipe key ``physics.phase_rule``)
    ``change_driven`` (the default): water changes phase only where the imposed change requires
    it, as models with a one-sided rule do (freeze only liquid in excess of the supercooled
    curve, melt only above T_f, hold the temperature at T_f while latent heat is paid).
    Cooling freezes only liquid above the freezing curve at the new temperature; warming melts
    ice only where the temperature would rise above T_f; in energy mode a layer at T_f with both
    phases stays there until the latent heat is paid. A state such a model holds as stable
    (ice with liquid below the curve, both phases at T_f) is never re-balanced.
    ``equilibrium``: for models that diagnose the liquid/ice split from temperature at every
    step. The split at the starting temperature is first taken as such a model would diagnose
    it (:func:`equilibrate_phase`; no imposed energy is spent on it), then the change is
    imposed and the new state is put on the equilibrium curve: below T_f the liquid content
    equals ``min(total water, supercooled limit)`` (Niu and Yang 2006); above T_f there is no
    ice; at exactly T_f a layer whose water exceeds the porosity may hold ice.
Disequilibrium policy
    A starting state need not be in phase equilibrium for the soil parameters used (another
    model's freezing curve or parameters may leave liquid above the curve, or ice with liquid
    below it). :func:`equilibrium_shift` measures what the equilibrium rule would move, so that
    the caller can report it. The change-driven rule does not act on it: liquid above the
    starting temperature's curve is kept aside as liquid (only the curve's own drop freezes on
    cooling), and ice above T_f is left to the model. Cells with ``dT == 0`` are returned
    bit-identical, whatever their state, under both rules.
Invariants (tested as properties)
    Water (liquid + ice) is conserved exactly. The temperature change never has the sign
    opposite to the imposed one. Energy mode: ``|dT| <= |imposed dT|`` and the enthalpy change
    is ``C_0 * dT_imposed * dz``; the phase change is what that energy pays for. Temperature
    mode: ``dT`` is the imposed change exactly. From a state consistent with the rule (no liquid
    above the curve below T_f, no ice above T_f) the result is consistent again.
Missing values and invalid inputs
    The mode functions change only cells with ``dT != 0`` and finite T and dT; every other
    cell (including NaN or fill-valued ones) is returned bit-identical with zero ledger
    entries. A cell they change must have valid water (>= 0, finite) and parameters, else
    they raise :class:`~initgen.errors.InputError` naming the quantity and the cell count.
    The other functions are plain formulas: NaN propagates (clamps neither change nor count
    NaN).
Suggested order for a caller
    1. convert units (:func:`temperature_to_kelvin`, :func:`water_to_volumetric`);
    2. on the input, :func:`disequilibrium` and :func:`equilibrium_shift` (reported only);
    3. :func:`apply_energy_mode` or :func:`apply_temperature_mode` with the recipe's phase
       rule (water conserved exactly);
    4. on the output, :func:`clamp_soil_temperature` and :func:`clamp_snow_temperature`
       (counted: they change energy; the phase is not re-equilibrated after them); the
       pipeline (``plan.apply_block``) calls exactly these;
    5. convert back (:func:`kelvin_to_units`, :func:`volumetric_to_water`).
    Every clamp returns ``(values, count)`` for the ledger.

References
----------
.. [1] Clapp, R. B., and Hornberger, G. M. (1978). Empirical equations for some soil hydraulic
   properties. *Water Resources Research* 14(4), 601-604, Table 2.
.. [2] Cosby, B. J., Hornberger, G. M., Clapp, R. B., and Ginn, T. R. (1984). A statistical
   exploration of the relationships of soil moisture characteristics to the physical
   properties of soils. *Water Resources Research* 20(6), 682-690, Tables 4 and 5.
.. [3] Niu, G.-Y., and Yang, Z.-L. (2006). Effects of frozen soil on snowmelt runoff and soil
   water storage at a continental scale. *Journal of Hydrometeorology* 7, 937-952.
.. [4] de Vries, D. A. (1963). Thermal properties of soils. In W. R. van Wijk (Ed.),
   *Physics of Plant Environment*, North-Holland, 210-235.
.. [5] Moene, A. F., and van Dam, J. C. (2014). *Transport in the Atmosphere-Vegetation-Soil
   Continuum*. Cambridge University Press, Table 2.2.
"""
