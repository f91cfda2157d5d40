"""The two modes (energy and temperature) under the two phase rules (change-driven, equilibrium):
the step that turns an imposed change into a new temperature, liquid and ice.
Conventions and references: :mod:`initgen.science.soil`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from initgen.errors import InputError
from initgen.science.constants import CV_SOLID_DEFAULT, CV_WATER, RHO_WATER, T_FREEZE
from initgen.science.soil.freezing import _liq_max_below, equilibrate_phase
from initgen.science.soil.properties import _CV_ICE_WE, _DCV, _LV, _capacity, _enthalpy_density, _f64
from initgen.science.soil.solver import (_broadcast, _map_blocks, _solve_block, _valid_porosity, _valid_psi,
                                         _valid_thickness)


class SoilChange(NamedTuple):
    """Result of :func:`apply_energy_mode` or :func:`apply_temperature_mode`, per layer cell.

    Attributes
    ----------
    T : numpy.ndarray
        New temperature, K.
    liq, ice : numpy.ndarray
        New liquid and ice (liquid-equivalent) contents, m3 m-3.
    frozen_kg_m2 : numpy.ndarray
        Liquid water that froze, kg m-2 (>= 0).
    melted_kg_m2 : numpy.ndarray
        Ice that melted, kg m-2 (>= 0).
    sensible_J_m2 : numpy.ndarray
        Sensible part of the enthalpy change, J m-2 (see :func:`energy_of_change`).
    latent_J_m2 : numpy.ndarray
        Latent part, J m-2; > 0 when ice melted.
    """

    T: np.ndarray
    liq: np.ndarray
    ice: np.ndarray
    frozen_kg_m2: np.ndarray
    melted_kg_m2: np.ndarray
    sensible_J_m2: np.ndarray
    latent_J_m2: np.ndarray


def _mode_inputs(T, liq, ice, dT, dz, porosity, psi_sat_m, b, c_solid):
    return _broadcast([_f64(a) for a in (T, liq, ice, dT, dz, porosity, psi_sat_m, b,
                                         CV_SOLID_DEFAULT if c_solid is None else c_solid)])


_CHECKS = (  # (argument index, test of validity, what is wrong, what to do)
    (0, lambda v: v > 0, "soil temperature <= 0 K", "check the temperature units"),
    (1, lambda v: (v >= 0) & (v < np.inf), "negative or missing liquid water",
     "fix negative water in the input, or check the fill value"),
    (2, lambda v: (v >= 0) & (v < np.inf), "negative or missing ice",
     "fix negative water in the input, or check the fill value"),
    (1, lambda v: v <= 1.0, "liquid water above 1 m3 m-3", "check the water units"),
    (2, lambda v: v <= 1.0, "ice above 1 m3 m-3", "check the water units"),
    (4, _valid_thickness, "layer thickness dz not finite and > 0 m",
     "check the layer geometry"),
    (5, _valid_porosity, "porosity outside (0, 1] m3 m-3",
     "check the porosity variable or the texture"),
    (6, _valid_psi, "psi_sat_m zero or missing",
     "check psi_sat (a suction magnitude in m) or the texture"),
    (7, lambda v: (v > 0) & (v < np.inf), "Clapp-Hornberger b not finite and > 0",
     "check clapp_b or the texture"),
    (8, lambda v: (v >= 0) & (v < np.inf), "solid heat capacity c_solid negative or missing",
     "check c_solid or the texture"),
)


def _touched(args, where):
    """Cells a mode changes: dT != 0 with finite T and dT. Every such cell must have valid
    water and parameters (checked here, InputError otherwise); other cells are passed through."""
    T, dT = args[0], args[3]
    touched = (dT != 0) & np.isfinite(dT) & np.isfinite(T)
    ok = np.ones_like(touched)
    for i, test, _, _ in _CHECKS:
        ok &= test(args[i])
    bad = touched & ~ok
    if bad.any():
        for i, test, what, todo in _CHECKS:
            n = int(np.count_nonzero(touched & ~test(args[i])))
            if n:
                raise InputError(f"{where}: {n} cell(s) to perturb have {what}; {todo}")
    return touched


def _run_mode(block_fn, shape, views, where):
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return SoilChange(*_map_blocks(lambda flat: block_fn(*flat, _touched(flat, where)), shape, views, 7))


def _finish(T0, liq0, ice0, T1, liq1, ice1, touched, H0d, Csol, dz):
    """The seven outputs of one block; cells not touched keep their exact inputs."""
    if not touched.all():
        T1 = np.where(touched, T1, T0)
        liq1 = np.where(touched, liq1, liq0)
        ice1 = np.where(touched, ice1, ice0)
    H1d = _enthalpy_density(_capacity(Csol, liq1, ice1), T1, liq1)
    dl = liq1 - liq0
    latent = _LV * dl * dz
    sensible = (H1d - H0d) * dz - latent
    if not touched.all():
        sensible = np.where(touched, sensible, 0.0)   # NaN-safe zero for untouched cells
        latent = np.where(touched, latent, 0.0)
        dl = np.where(touched, dl, 0.0)
    dmass = (RHO_WATER * dz) * dl
    return T1, liq1, ice1, np.maximum(-dmass, 0.0), np.maximum(dmass, 0.0), sensible, latent


def settle_one_sided(T, liq, ice, porosity, psi_sat_m, b):
    r"""Bring a state to the consistency the change-driven rule keeps, changing phase only where
    the state's own temperature requires it.

    .. math:: T < T_f:\ \theta_{liq}' = \min(\theta_{liq}, \theta_{liq}^{max}(T)); \qquad
              T > T_f:\ \theta_{ice}' = 0; \qquad T = T_f:\ \text{unchanged}

    (liquid above the supercooled limit of Niu and Yang 2006 freezes; ice above T_f melts;
    liquid below the curve with ice present is stable and kept). Total water is conserved.
    Used for a state that no imposed change produced, such as a blend of two files.

    Parameters
    ----------
    T : array_like
        Temperature, K.
    liq, ice : array_like
        Liquid and ice (liquid-equivalent) contents, m3 m-3.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).

    Returns
    -------
    tuple of numpy.ndarray
        ``(theta_liq, theta_ice)``, m3 m-3.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    T, liq, ice = _f64(T), _f64(liq), _f64(ice)
    below = T < T_FREEZE
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        phi = _f64(porosity)
        lmax = _liq_max_below(np.where(below, T, T_FREEZE - 1.0), phi, np.abs(_f64(psi_sat_m)), _f64(b),
                              cap=phi)   # the curve is capped at the porosity
    stays = np.where(below, np.minimum(liq, lmax), liq)
    above = T > T_FREEZE
    liq1 = np.where(above, liq + ice, stays)
    ice1 = np.where(above, 0.0, ice + (liq - stays))
    return liq1, ice1


def _diagnosed_start(T, liq, ice, phi, psi, b, touched):
    """The equilibrium rule's starting state: the split a model that diagnoses the phase from
    temperature would see at the starting temperature (only where the cell is perturbed)."""
    le, ie = equilibrate_phase(np.where(touched, T, T_FREEZE), liq, ice, phi, psi, b)
    return np.where(touched, le, liq), np.where(touched, ie, ice)


def _below_resolution(T, liq, ice, dT, phi, cs):
    """Cells whose imposed enthalpy change is below the round-off of their enthalpy (a factor of
    1e-26 deep in a profile): the solver cannot resolve it, so the cell is left as it is rather
    than moved by one float64 step of T, possibly against the imposed sign."""
    C0 = _capacity((1.0 - phi) * cs, liq, ice)
    scale = np.abs(C0 * (T - T_FREEZE)) + _LV * (liq + ice) + C0
    return np.abs(C0 * dT) <= 8.0 * np.finfo(np.float64).eps * scale


def _energy_block(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    touched = touched & ~_below_resolution(T, liq, ice, dT, phi, cs)
    liq, ice = _diagnosed_start(T, liq, ice, phi, psi, b, touched)
    W = liq + ice
    Csol = (1.0 - phi) * cs
    C0 = _capacity(Csol, liq, ice)
    H0d = _enthalpy_density(C0, T, liq)                    # J m-3
    target = H0d + C0 * dT
    target[~touched] = np.nan                              # untouched cells are not solved
    T1, liq1 = _solve_block(target, W, phi, psi, b, Csol, T, 40)
    return _finish(T, liq, ice, T1, liq1, W - liq1, touched, H0d, Csol, dz)


def _temperature_block(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    liq, ice = _diagnosed_start(T, liq, ice, phi, psi, b, touched)
    Csol = (1.0 - phi) * cs
    H0d = _enthalpy_density(_capacity(Csol, liq, ice), T, liq)
    T1 = T + dT
    liq1, ice1 = equilibrate_phase(T1, liq, ice, phi, psi, b)
    return _finish(T, liq, ice, T1, liq1, ice1, touched, H0d, Csol, dz)


def _freezable(T, liq, phi, psi, b):
    """Liquid the change-driven rule may freeze on cooling, and the liquid it leaves alone.

    At or above T_f all liquid may freeze (once the curve requires it). Below T_f only the
    liquid on or below the supercooled curve at the starting temperature takes part; liquid
    above that curve (a state these soil parameters call out of equilibrium) is input
    disequilibrium: it is reported by the caller and kept as it is, not acted on.
    Returns ``(W_eligible, kept)`` with ``W_eligible + kept == liq``.
    """
    lmax0 = np.where(T < T_FREEZE, _liq_max_below(np.minimum(T, T_FREEZE), phi, psi, b, cap=phi), np.inf)
    elig = np.where(T >= T_FREEZE, liq, np.minimum(liq, lmax0))
    return elig, liq - elig


def _energy_block_change_driven(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    touched = touched & ~_below_resolution(T, liq, ice, dT, phi, cs)
    Csol = (1.0 - phi) * cs
    C0 = _capacity(Csol, liq, ice)
    H0d = _enthalpy_density(C0, T, liq)                    # J m-3
    e = C0 * dT                                            # imposed enthalpy change, J m-3
    T1 = T + dT
    liq1, ice1 = liq.copy(), ice.copy()
    # warming: sensible up to T_f; at T_f the energy melts ice (the temperature is held there
    # until the latent heat is paid); what is left warms the all-liquid layer. Below T_f no ice
    # melts, and a layer already above T_f (ice there is input disequilibrium) only warms.
    melt = touched & (dT > 0) & (T <= T_FREEZE) & (ice > 0) & (T1 > T_FREEZE)
    if melt.any():
        e2 = e - C0 * (T_FREEZE - T)                       # left at T_f, J m-3 (> 0)
        m = np.minimum(ice, e2 / _LV)
        e3 = np.maximum(e2 - _LV * m, 0.0)
        T1 = np.where(melt, T_FREEZE + e3 / (C0 + _DCV * m), T1)
        liq1 = np.where(melt, liq + m, liq1)
        ice1 = np.where(melt, ice - m, ice1)
    # cooling: along the freezing curve, freezing only the liquid that the curve at the new,
    # lower temperature cannot hold (ice present and liquid kept aside are fixed capacities)
    cool = touched & (dT < 0)
    if cool.any():
        elig, kept = _freezable(T, liq, phi, psi, b)
        Cfix = Csol + _CV_ICE_WE * ice + CV_WATER * kept
        target = np.where(cool, _enthalpy_density(Cfix + CV_WATER * elig, T, elig) + e, np.nan)
        Tc, lc = _solve_block(target, elig, phi, psi, b, Cfix, T, 40)
        T1 = np.where(cool, Tc, T1)
        liq1 = np.where(cool, lc + kept, liq1)
        ice1 = np.where(cool, ice + (elig - lc), ice1)
    return _finish(T, liq, ice, T1, liq1, ice1, touched, H0d, Csol, dz)


def _temperature_block_change_driven(T, liq, ice, dT, dz, phi, psi, b, cs, touched):
    Csol = (1.0 - phi) * cs
    H0d = _enthalpy_density(_capacity(Csol, liq, ice), T, liq)
    T1 = T + dT
    W = liq + ice
    # warming melts ice only where the temperature rises from at or below T_f to above it
    melt = (dT > 0) & (T <= T_FREEZE) & (T1 > T_FREEZE)
    liq1 = np.where(melt, W, liq)
    ice1 = np.where(melt, 0.0, ice)
    # cooling freezes only liquid above the curve at the new temperature
    cool = (dT < 0) & (T1 < T_FREEZE)
    if cool.any():
        elig, kept = _freezable(T, liq, phi, psi, b)
        lmax1 = _liq_max_below(np.where(cool, T1, T_FREEZE - 1.0), phi, psi, b, cap=phi)
        stays = np.minimum(elig, lmax1)
        liq1 = np.where(cool, stays + kept, liq1)
        ice1 = np.where(cool, ice + (elig - stays), ice1)
    return _finish(T, liq, ice, T1, liq1, ice1, touched, H0d, Csol, dz)


#: The phase rules a mode can follow (recipe key ``physics.phase_rule``).
PHASE_RULES = ("change_driven", "equilibrium")

_BLOCKS = {
    ("energy", "change_driven"): _energy_block_change_driven,
    ("energy", "equilibrium"): _energy_block,
    ("temperature", "change_driven"): _temperature_block_change_driven,
    ("temperature", "equilibrium"): _temperature_block,
}


def _block_fn(mode, rule):
    fn = _BLOCKS.get((mode, rule))
    if fn is None:
        raise InputError(f"physics.phase_rule: unknown phase rule {rule!r}; use one of {', '.join(PHASE_RULES)}")
    return fn


def apply_energy_mode(T, liq, ice, dT_target, dz, porosity, psi_sat_m, b, c_solid=None, rule="change_driven"):
    """Impose the enthalpy change of a temperature anomaly and solve temperature and phase.

    .. math:: \\Delta H = C_0\\,\\Delta T_{target}\\,\\Delta z, \\qquad
              H(T_1, \\theta_{liq,1}, \\theta_{ice,1}) = H(T_0, \\theta_{liq,0},
              \\theta_{ice,0}) + \\Delta H

    with C_0 = :func:`heat_capacity` of the starting state and H from :func:`enthalpy`. Water
    is conserved; latent heat can only damp the change (|dT| <= |dT_target|).

    ``rule='change_driven'`` (default): warming below T_f is sensible only; a layer reaching
    T_f with ice is held there while the energy melts ice (H = rho_w L_f theta_liq at T_f), and
    what is left warms the all-liquid layer. Cooling follows the freezing curve, freezing only
    the liquid the curve at the new temperature cannot hold (solved as :func:`solve_enthalpy`
    with the ice present and any liquid above the starting curve as fixed capacities).
    ``rule='equilibrium'``: the starting split is taken as diagnosed at T_0
    (:func:`equilibrate_phase`) and the new state lies on the equilibrium curve
    (:func:`solve_enthalpy`). Cells with ``dT_target == 0``, or a NaN temperature or anomaly,
    are returned unchanged under both rules.

    Parameters
    ----------
    T : array_like
        Starting temperature, K.
    liq, ice : array_like
        Starting liquid and ice (liquid-equivalent) contents, m3 m-3 (>= 0).
    dT_target : array_like
        Temperature anomaly defining the energy change, K.
    dz : array_like
        Layer thickness, m.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).
    c_solid : array_like, optional
        Heat capacity of the solids, J m-3 K-1 (default ``CV_SOLID_DEFAULT``).
    rule : {'change_driven', 'equilibrium'}
        Phase rule (see the module notes).

    Returns
    -------
    SoilChange
        ``(T, liq, ice, frozen_kg_m2, melted_kg_m2, sensible_J_m2, latent_J_m2)``, arrays of
        the broadcast shape; sensible + latent = Delta H within the solver tolerance.

    Raises
    ------
    InputError
        If a cell to be changed has negative or missing water, T <= 0 K, or an invalid
        parameter (the message names it and counts the cells).

    References
    ----------
    .. [1] de Vries (1963) for C; Niu and Yang (2006) for the freezing curve.
    """
    block = _block_fn("energy", rule)
    shape, views = _mode_inputs(T, liq, ice, dT_target, dz, porosity, psi_sat_m, b, c_solid)
    return _run_mode(block, shape, views, "apply_energy_mode")


def apply_temperature_mode(T, liq, ice, dT, dz, porosity, psi_sat_m, b, c_solid=None, rule="change_driven"):
    """Add a temperature anomaly exactly, and change the water phase as the rule requires.

    .. math:: T_1 = T_0 + \\Delta T

    ``rule='change_driven'`` (default): cooling to T_1 < T_f freezes only liquid above the
    supercooled limit at T_1 (Niu and Yang 2006); warming from T_0 <= T_f to T_1 > T_f melts
    all ice; nothing else changes phase. ``rule='equilibrium'``:
    ``(theta_liq, theta_ice) = equilibrate_phase(T_1, ...)``, the split a diagnosing model
    would see, measured from the split it diagnoses at T_0.
    The energy the change implies (sensible and latent, from :func:`enthalpy`) is reported.
    Cells with ``dT == 0``, or a NaN temperature or anomaly, are returned unchanged.

    Parameters
    ----------
    T, liq, ice : array_like
        Starting state: K, m3 m-3, m3 m-3.
    dT : array_like
        Temperature anomaly, K.
    dz, porosity, psi_sat_m, b, c_solid : array_like
        As in :func:`apply_energy_mode`.
    rule : {'change_driven', 'equilibrium'}
        Phase rule (see the module notes).

    Returns
    -------
    SoilChange
        ``(T, liq, ice, frozen_kg_m2, melted_kg_m2, sensible_J_m2, latent_J_m2)``.

    Raises
    ------
    InputError
        As :func:`apply_energy_mode`.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    """
    block = _block_fn("temperature", rule)
    shape, views = _mode_inputs(T, liq, ice, dT, dz, porosity, psi_sat_m, b, c_solid)
    return _run_mode(block, shape, views, "apply_temperature_mode")
