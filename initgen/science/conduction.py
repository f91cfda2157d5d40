"""Soil thermal conductivity (Johansen 1975) and implicit heat conduction on a model's layers.

Pure numpy: no file I/O and no recipe knowledge (floor 3). Used by ``persistence.py`` to estimate
how long an imposed temperature anomaly lasts under pure conduction.

Conductivity constants are Johansen's (1975) as restated by Farouki (1981) and Peters-Lidard et
al. (1998): quartz 7.7, other minerals 2.0 (3.0 when the quartz fraction is 0.2 or less), liquid
water 0.57 and ice 2.2 W m-1 K-1; solids of density 2700 kg m-3.
"""

from __future__ import annotations

import numpy as np

from initgen.errors import InputError
from initgen.science.soil.properties import _f64

K_QUARTZ = 7.7  # W m-1 K-1, Johansen (1975)
K_OTHER_MINERALS = 2.0  # quartz fraction > 0.2
K_OTHER_MINERALS_LOW_QUARTZ = 3.0  # quartz fraction <= 0.2
K_WATER = 0.57
K_ICE = 2.2
RHO_SOLIDS = 2700.0  # kg m-3, particle density of the soil solids

# Quartz content (fraction of the solids) by texture class, Peters-Lidard et al. (1998), as
# carried in published land-model parameter tables. Sand, loamy sand, sandy loam, silt loam and
# loam were re-read in such a table; the other classes are recalled, not re-read.
QUARTZ_BY_TEXTURE = {
    "sand": 0.92, "loamy sand": 0.82, "sandy loam": 0.60, "silt loam": 0.25, "loam": 0.40,
    "sandy clay loam": 0.60, "silty clay loam": 0.10, "clay loam": 0.35, "sandy clay": 0.52,
    "silty clay": 0.10, "clay": 0.25,
}
# Johansen's "coarse" Kersten relation is for sands; these classes use it.
COARSE_TEXTURES = ("sand", "loamy sand")


def dry_conductivity(porosity):
    """Thermal conductivity of dry soil from its dry bulk density, W m-1 K-1.

    .. math:: k_{dry} = \\frac{0.135\\,\\gamma_d + 64.7}{2700 - 0.947\\,\\gamma_d},
              \\qquad \\gamma_d = (1 - \\phi)\\,2700\\ \\mathrm{kg\\,m^{-3}}

    Parameters
    ----------
    porosity : array_like
        Porosity phi, m3 m-3.

    Returns
    -------
    numpy.ndarray
        k_dry, W m-1 K-1.

    References
    ----------
    .. [1] Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Trondheim (CRREL
       draft translation 637, 1977).
    .. [2] Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    .. [3] Peters-Lidard, C. D., Blackburn, E., Liang, X., and Wood, E. F. (1998). The effect of
       soil thermal conductivity parameterization on surface energy fluxes and temperatures.
       J. Atmos. Sci. 55, 1209-1224.
    """
    gamma_d = (1.0 - _f64(porosity)) * RHO_SOLIDS
    return (0.135 * gamma_d + 64.7) / (RHO_SOLIDS - 0.947 * gamma_d)


def solids_conductivity(quartz):
    """Conductivity of the soil solids as the geometric mean of quartz and other minerals.

    .. math:: k_s = k_q^{q}\\,k_o^{1-q}, \\quad k_q = 7.7, \\quad
              k_o = 2.0\\ (q > 0.2),\\ 3.0\\ (q \\le 0.2)\\ \\mathrm{W\\,m^{-1}\\,K^{-1}}

    Parameters
    ----------
    quartz : array_like
        Quartz fraction q of the solids, 0..1.

    Returns
    -------
    numpy.ndarray
        k_s, W m-1 K-1.

    References
    ----------
    .. [1] Johansen, O. (1975), as given by Peters-Lidard et al. (1998), J. Atmos. Sci. 55,
       1209-1224, and Farouki, O. T. (1981), CRREL Monograph 81-1.
    """
    q = _f64(quartz)
    k_o = np.where(q > 0.2, K_OTHER_MINERALS, K_OTHER_MINERALS_LOW_QUARTZ)
    return K_QUARTZ ** q * k_o ** (1.0 - q)


def saturated_conductivity(k_solids, porosity, unfrozen_fraction=1.0):
    """Conductivity of saturated soil, geometric mean of solids, ice and liquid water.

    .. math:: k_{sat} = k_s^{1-\\phi}\\,k_i^{\\phi - x_u}\\,k_w^{x_u},
              \\qquad x_u = \\phi \\cdot (\\text{unfrozen fraction of the water})

    Parameters
    ----------
    k_solids : array_like
        k_s, W m-1 K-1.
    porosity : array_like
        phi, m3 m-3.
    unfrozen_fraction : array_like
        Liquid share of the soil water, 0..1 (1: unfrozen).

    Returns
    -------
    numpy.ndarray
        k_sat, W m-1 K-1.

    References
    ----------
    .. [1] Johansen, O. (1975); Peters-Lidard et al. (1998), J. Atmos. Sci. 55, 1209-1224.
    """
    phi = _f64(porosity)
    xu = _f64(unfrozen_fraction) * phi
    return _f64(k_solids) ** (1.0 - phi) * K_ICE ** (phi - xu) * K_WATER ** xu


def kersten_number(saturation, frozen=False, coarse=False):
    """Johansen's Kersten number: the normalised conductivity between dry and saturated.

    Unfrozen fine soil ``Ke = log10(Sr) + 1`` (Sr > 0.1), unfrozen coarse soil
    ``Ke = 0.7 log10(Sr) + 1`` (Sr > 0.05), frozen soil ``Ke = Sr``; 0 below the limits.

    Parameters
    ----------
    saturation : array_like
        Degree of saturation Sr = (liquid + ice) / porosity, 0..1.
    frozen : array_like of bool
        Whether the layer holds ice.
    coarse : array_like of bool
        Johansen's coarse (sand) relation instead of the fine one.

    Returns
    -------
    numpy.ndarray
        Ke, 0..1.

    References
    ----------
    .. [1] Johansen, O. (1975); Farouki, O. T. (1981), CRREL Monograph 81-1;
       Peters-Lidard et al. (1998), J. Atmos. Sci. 55, 1209-1224.
    """
    sr = np.clip(_f64(saturation), 0.0, 1.0)
    with np.errstate(divide="ignore"):
        lg = np.log10(np.maximum(sr, 1e-300))
    fine = np.where(sr > 0.1, lg + 1.0, 0.0)
    rough = np.where(sr > 0.05, 0.7 * lg + 1.0, 0.0)
    unfrozen = np.where(np.asarray(coarse, bool), rough, fine)
    return np.clip(np.where(np.asarray(frozen, bool), sr, unfrozen), 0.0, 1.0)


def johansen_conductivity(theta_liq, theta_ice, porosity, quartz, coarse=False):
    """Thermal conductivity of moist (and frozen) soil by Johansen (1975), W m-1 K-1.

    .. math:: k = k_{dry} + K_e\\,(k_{sat} - k_{dry})

    with :func:`dry_conductivity`, :func:`saturated_conductivity` (solids from
    :func:`solids_conductivity`) and :func:`kersten_number`; a layer with ice is frozen.

    Parameters
    ----------
    theta_liq, theta_ice : array_like
        Liquid water and ice (liquid-water equivalent) contents, m3 m-3.
    porosity : array_like
        phi, m3 m-3.
    quartz : array_like
        Quartz fraction of the solids, 0..1.
    coarse : array_like of bool
        Coarse (sand) Kersten relation for unfrozen soil.

    Returns
    -------
    numpy.ndarray
        k, W m-1 K-1.

    References
    ----------
    .. [1] Johansen, O. (1975). Thermal conductivity of soils. PhD thesis, Trondheim.
    .. [2] Farouki, O. T. (1981). Thermal properties of soils. CRREL Monograph 81-1.
    .. [3] Peters-Lidard, C. D., et al. (1998). J. Atmos. Sci. 55, 1209-1224.
    """
    liq, ice, phi = _f64(theta_liq), _f64(theta_ice), _f64(porosity)
    water = liq + ice
    sr = np.where(phi > 0, water / np.where(phi > 0, phi, 1.0), 0.0)
    unfrozen = np.where(water > 0, liq / np.where(water > 0, water, 1.0), 1.0)
    k_sat = saturated_conductivity(solids_conductivity(quartz), phi, unfrozen)
    k_dry = dry_conductivity(phi)
    return k_dry + kersten_number(sr, frozen=ice > 0, coarse=coarse) * (k_sat - k_dry)


# ---------------------------------------------------------------------------------------------
# Implicit finite-volume conduction
# ---------------------------------------------------------------------------------------------


def interface_conductance(dz, k, top="fixed"):
    """Conductances (W m-2 K-1) between layer nodes, with nodes at layer centres.

    Between layers i and i+1 the half-layer resistances add (the harmonic mean of the two
    conductivities over the node distance): ``G = 1 / (dz_i / (2 k_i) + dz_{i+1} / (2 k_{i+1}))``.
    At the top face (``top='fixed'``) ``G_0 = 2 k_0 / dz_0``; ``top='insulated'`` gives 0.

    Parameters
    ----------
    dz, k : numpy.ndarray
        Thicknesses (m) and conductivities (W m-1 K-1), shape (..., L).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Top-face conductance, shape (...,), and interface conductances, shape (..., L-1).

    References
    ----------
    .. [1] Patankar, S. V. (1980). Numerical Heat Transfer and Fluid Flow, Section 4.2-3
       (harmonic-mean interface conductivity of the finite-volume method).
    """
    r = dz / (2.0 * k)
    g_int = 1.0 / (r[..., :-1] + r[..., 1:])
    g_top = 1.0 / r[..., 0] if top == "fixed" else np.zeros(dz.shape[:-1])
    return g_top, g_int


def thomas(lower, diag, upper, rhs):
    """Solve tridiagonal systems along the last axis, vectorised over the leading axes.

    ``lower[..., i]`` multiplies x[i-1] (``lower[..., 0]`` unused), ``upper[..., i]`` multiplies
    x[i+1] (``upper[..., -1]`` unused). No pivoting: for the diagonally dominant matrices of
    implicit conduction (Thomas algorithm, e.g. Press et al. 1992, Numerical Recipes,
    Section 2.4).
    """
    n = diag.shape[-1]
    cp = np.empty_like(diag)
    dp = np.empty(np.broadcast_shapes(diag.shape, rhs.shape))
    beta = diag[..., 0]
    cp[..., 0] = upper[..., 0] / beta
    dp[..., 0] = rhs[..., 0] / beta
    for i in range(1, n):
        beta = diag[..., i] - lower[..., i] * cp[..., i - 1]
        cp[..., i] = upper[..., i] / beta
        dp[..., i] = (rhs[..., i] - lower[..., i] * dp[..., i - 1]) / beta
    x = dp
    for i in range(n - 2, -1, -1):
        x[..., i] = dp[..., i] - cp[..., i] * x[..., i + 1]
    return x


def conduct(T0, dz, C, k, times_s, *, top="fixed", steps_per_interval=None, max_step_s=3600.0, min_steps=1):
    """Backward-Euler finite-volume heat conduction in many columns of layers.

    Solves ``C dz dT_i/dt = G_{i-1/2} (T_{i-1} - T_i) - G_{i+1/2} (T_i - T_{i+1})`` with the
    temperature held at 0 on the top face (``top='fixed'``; ``'insulated'`` for no flux) and no
    flux at the bottom, implicitly in time (unconditionally stable, no oscillation: every
    decay mode is damped by ``1 / (1 + lambda dt)`` > 0). Conductances by
    :func:`interface_conductance`.

    Parameters
    ----------
    T0 : numpy.ndarray
        Initial temperature (anomaly), K, shape (N, L).
    dz : numpy.ndarray
        Layer thicknesses, m, shape (L,) or (N, L).
    C : numpy.ndarray
        Volumetric heat capacity, J m-3 K-1, shape (N, L) or broadcastable.
    k : numpy.ndarray
        Thermal conductivity, W m-1 K-1, shape (N, L) or broadcastable.
    times_s : sequence of float
        Increasing output times, s.
    top : {'fixed', 'insulated'}
        Top-face condition.
    steps_per_interval : int, optional
        Equal time steps between consecutive output times; default: at least ``min_steps``
        steps, each no longer than ``max_step_s``.

    Returns
    -------
    numpy.ndarray
        Temperatures at each output time, shape (len(times_s), N, L).

    References
    ----------
    .. [1] Patankar, S. V. (1980). Numerical Heat Transfer and Fluid Flow, Ch. 4 (fully implicit
       finite-volume conduction).
    .. [2] Carslaw, H. S., and Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed., Sect.
       3.3 (the slab solution the tests compare with).
    """
    T = np.array(T0, dtype=np.float64, ndmin=2)
    n, L = T.shape
    dz = np.broadcast_to(_f64(dz), (n, L))
    cap = np.broadcast_to(_f64(C), (n, L)) * dz  # J m-2 K-1 per layer
    kk = np.broadcast_to(_f64(k), (n, L))
    if not (np.all(dz > 0) and np.all(cap > 0) and np.all(kk > 0)):
        raise InputError("conduction: thicknesses, heat capacities and conductivities must be positive")
    if L == 1:
        g_top = 2.0 * kk[:, 0] / dz[:, 0] if top == "fixed" else np.zeros(n)
        g_int = np.zeros((n, 0))
    else:
        g_top, g_int = interface_conductance(dz, kk, top)
    g_up = np.concatenate([g_top[:, None], g_int], axis=1)  # conductance above each node
    g_dn = np.concatenate([g_int, np.zeros((n, 1))], axis=1)  # below (no flux at the bottom)
    out = np.empty((len(times_s), n, L))
    t_prev = 0.0
    for j, t in enumerate(times_s):
        span = float(t) - t_prev
        if span < 0:
            raise InputError("conduction: output times must increase")
        m = steps_per_interval or max(int(min_steps), int(np.ceil(span / max_step_s)))
        if span > 0:
            dt = span / m
            lower = -dt * np.concatenate([np.zeros((n, 1)), g_int], axis=1)
            upper = -dt * g_dn
            diag = cap + dt * (g_up + g_dn)
            # one factorisation, m substitutions (the matrix does not change within the interval)
            cp = np.empty((n, L))
            inv = np.empty((n, L))
            inv[:, 0] = 1.0 / diag[:, 0]
            cp[:, 0] = upper[:, 0] * inv[:, 0]
            for i in range(1, L):
                inv[:, i] = 1.0 / (diag[:, i] - lower[:, i] * cp[:, i - 1])
                cp[:, i] = upper[:, i] * inv[:, i]
            # rows contiguous (L, N); a_i = lower_i / pivot_i, so d'_i = d_i / pivot_i - a_i d'_{i-1}
            a_t, cp_t, inv_t = (lower * inv).T.copy(), cp.T.copy(), inv.T.copy()
            x = (T * cap).T.copy()
            capt = cap.T.copy()
            buf = np.empty(n)
            for step in range(m):
                x[0] *= inv_t[0]
                for i in range(1, L):
                    np.multiply(a_t[i], x[i - 1], out=buf)
                    x[i] *= inv_t[i]
                    x[i] -= buf
                for i in range(L - 2, -1, -1):
                    np.multiply(cp_t[i], x[i + 1], out=buf)
                    x[i] -= buf
                if step != m - 1:
                    x *= capt
            T = x.T.copy()
        out[j] = T
        t_prev = float(t)
    return out


def slab_series(x_over_l, fourier, terms=200):
    """Carslaw and Jaeger (1959), Sect. 3.3: slab 0 <= x <= l at uniform T0 from t = 0, the face
    x = l held at 0 and x = 0 insulated:
    ``T/T0 = sum_n 4 (-1)^n / ((2n+1) pi) cos((2n+1) pi x / 2l) exp(-kappa (2n+1)^2 pi^2 t / 4 l^2)``,
    with ``fourier = kappa t / l^2``.

    References
    ----------
    .. [1] Carslaw, H. S., and Jaeger, J. C. (1959). Conduction of Heat in Solids, 2nd ed.,
       Oxford, Section 3.3, Eq. (3).
    """
    nn = np.arange(terms)[:, None]
    m = (2 * nn + 1) * np.pi
    x = np.asarray(x_over_l, float)[None]
    return np.sum(4.0 * (-1.0) ** nn / m * np.cos(m * x / 2.0) * np.exp(-m ** 2 * fourier / 4.0), axis=0)


def slab_series_heat(fourier, terms=200):
    """Fraction of the heat left in the Carslaw and Jaeger (1959, Sect. 3.3) slab: the series
    integrated over the slab, ``sum_n 8 / ((2n+1)^2 pi^2) exp(-(2n+1)^2 pi^2 Fo / 4)``."""
    m = (2 * np.arange(terms) + 1) * np.pi
    return float(np.sum(8.0 / m ** 2 * np.exp(-m ** 2 * fourier / 4.0)))


__all__ = ["dry_conductivity", "solids_conductivity", "saturated_conductivity", "kersten_number",
           "johansen_conductivity", "interface_conductance", "thomas", "conduct", "slab_series",
           "slab_series_heat", "QUARTZ_BY_TEXTURE", "COARSE_TEXTURES"]
