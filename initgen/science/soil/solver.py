"""Energy mode: solve H(T, phase) = H_target for temperature and phase, block by block.
Conventions and references: :mod:`initgen.science.soil`.
"""

from __future__ import annotations

import numpy as np

from initgen.errors import InputError
from initgen.science import blocks
from initgen.science.constants import CV_SOLID_DEFAULT, GRAVITY, LATENT_HEAT_FUSION, T_FREEZE
from initgen.science.soil.freezing import _liq_max_below
from initgen.science.soil.properties import _CV_ICE_WE, _DCV, _LV, _f64

def _valid_thickness(dz):
    """Where a layer thickness is usable: finite and > 0 m (float64 arrays, elementwise)."""
    return (dz > 0) & (dz < np.inf)


def _valid_porosity(phi):
    """Where a porosity is usable: in (0, 1] m3 m-3 (NaN is not)."""
    return (phi > 0) & (phi <= 1)


def _valid_psi(psi):
    """Where a saturated suction is usable: finite and non-zero, m (either sign)."""
    return np.isfinite(psi) & (psi != 0)


def _validate_params(dz, porosity, b, where, psi=None):
    if psi is not None and not np.all(_valid_psi(psi)):
        raise InputError(f"{where}: psi_sat_m must be finite and non-zero (a suction magnitude in m); "
                         "check psi_sat or the texture")
    if not np.all(_valid_thickness(dz)):
        raise InputError(f"{where}: layer thickness dz must be finite and > 0 m; check the layer geometry")
    if not np.all(_valid_porosity(porosity)):
        raise InputError(f"{where}: porosity must lie in (0, 1] m3 m-3; check the porosity or texture")
    if not np.all(b > 0):
        raise InputError(f"{where}: Clapp-Hornberger b must be > 0; check clapp_b or the texture")


def solve_enthalpy(H_target, total_water, dz, porosity, psi_sat_m, b, c_solid=None, *,
                   T_guess=None, max_iter=40):
    """Temperature and phase partition with a given enthalpy, on the freezing curve.

    Finds T and theta_liq = min(W, theta_liq_max(T)) (T <= T_f), theta_liq = W (T > T_f),
    theta_ice = W - theta_liq, such that :func:`enthalpy` equals ``H_target``. Along this
    curve H is continuous and strictly increasing in T (for T above T_f - L_f / (c_w - c_i)
    = 112 K), so the solution is unique. Writing h = H / dz (J m-3), C_liq = (1 - phi) c_s +
    rho_w c_w W and L = rho_w L_f, the branches from warm to cold are:

    1. h >= L W: all liquid, T = T_f + (h - L W) / C_liq (closed form).
    2. L min(W, phi) <= h < L W (only when W > phi): latent plateau, T = T_f,
       theta_liq = h / L.
    3. from the plateau down to the kink where theta_liq_max(T) = min(W, phi): no phase
       change, H linear in T (closed form).
    4. colder: on the Niu-Yang curve. With s = T_f - T and z = ln(s / (T_f - s)),
       theta_liq_max = phi exp(-(ln(L_f / (g |psi_s|)) + z) / b) is a pure exponential in z
       and s = T_f / (1 + e^-z); the residual

       .. math:: F(z) = \\theta_{liq}(z)\\,(L - \\rho_w (c_w - c_i)\\, s) - K s - h,
                 \\quad K = (1-\\phi) c_s + \\rho_w c_i W

       is solved by Halley's method (analytic first and second derivatives), safeguarded by
       bisection inside a bracket [z_lo, z_hi] with F(z_lo) > 0 > F(z_hi), until a Halley
       step is below 1e-6 (relative; the error after it is ~1e-18) or |F| is at round-off
       level; at most ``max_iter`` steps (typically 3).

    Parameters
    ----------
    H_target : array_like
        Enthalpy, J m-2, relative to all water frozen at T_f (see :func:`enthalpy`).
    total_water : array_like
        W = theta_liq + theta_ice, m3 m-3 (>= 0).
    dz : array_like
        Layer thickness, m.
    porosity, psi_sat_m, b : array_like
        Freezing-curve parameters (see :func:`supercooled_liquid_max`).
    c_solid : array_like, optional
        Heat capacity of the solids, J m-3 K-1 (default ``CV_SOLID_DEFAULT``).
    T_guess : array_like, optional
        First guess of the temperature, K (e.g. the starting temperature); only speeds up
        branch 4.
    max_iter : int
        Iteration cap of branch 4.

    Returns
    -------
    tuple of numpy.ndarray
        ``(T K, theta_liq m3 m-3, theta_ice m3 m-3)``. In branch 4 the final T is moved to
        the nearest representable number on the warm side of the root and theta_liq is the
        content that gives exactly ``H_target`` there: the energy is exact to round-off of H
        and theta_liq never exceeds :func:`supercooled_liquid_max` (it lies below it by at
        most the effect of one float64 step of T, < 1e-9 m3 m-3). theta_ice = W - theta_liq.
        A NaN input gives NaN outputs. Targets that
        imply T below T_f / 2 = 136.6 K are outside the solver's range: T stops at 136.6 K
        and energy is not conserved there; the soil-temperature clamp (180 K) reports them.

    References
    ----------
    .. [1] Niu, G.-Y., and Yang, Z.-L. (2006). *Journal of Hydrometeorology* 7, 937-952.
    .. [2] de Vries, D. A. (1963), for the heat capacity (see :func:`heat_capacity`).
    """
    H = _f64(H_target)
    W = _f64(total_water)
    dz = _f64(dz)
    phi = _f64(porosity)
    psi = _f64(psi_sat_m)
    b = _f64(b)
    cs = _f64(CV_SOLID_DEFAULT if c_solid is None else c_solid)
    _validate_params(dz, phi, b, "solve_enthalpy", psi)
    if np.any(W < 0):
        raise InputError("solve_enthalpy: total_water has negative values; fix negative water in the input first")
    args = [H, W, dz, phi, psi, b, cs]
    if T_guess is not None:
        args.append(_f64(T_guess))

    def block(flat):
        Hb, Wb, dzb, phib, psib, bb, csb = flat[:7]
        Tb, lb = _solve_block(Hb / dzb, Wb, phib, psib, bb, (1.0 - phib) * csb,
                              flat[7] if T_guess is not None else None, max_iter)
        return Tb, lb, Wb - lb

    return tuple(_map_blocks(block, *_broadcast(args), 3))


def _broadcast(arrays):
    """The common shape of ``arrays`` and a read-only view of each at that shape.

    Parameters
    ----------
    arrays : list of numpy.ndarray

    Returns
    -------
    (tuple, list of numpy.ndarray)
        ``(shape, views)``.
    """
    shape = np.broadcast_shapes(*(a.shape for a in arrays))
    return shape, [np.broadcast_to(a, shape) for a in arrays]


def _flat_blocks(shape, views):
    """(index, [contiguous 1-D copies of each view's block]) for each block of ``shape``."""
    if shape == ():
        yield (), [np.reshape(np.array(v, dtype=np.float64), (1,)) for v in views]
        return
    for sl in blocks.slab_blocks(shape, blocks.SOIL_BLOCK_ELEMENTS):
        yield sl, [np.ascontiguousarray(v[sl]).reshape(-1) for v in views]


def _map_blocks(fn, shape, views, n_out):
    """Apply a per-block function to same-shape views, block by block (:func:`initgen.science.blocks.slab_blocks`).

    The one loop of the soil functions over blocks: :func:`solve_enthalpy` and the mode steps
    of :mod:`initgen.science.soil.modes` both run through it, so results do not depend on the
    block size.

    Parameters
    ----------
    fn : callable
        ``fn(flat) -> sequence of n_out 1-D arrays``, where ``flat`` holds a contiguous 1-D copy
        of each view's block (see :func:`_flat_blocks`).
    shape : tuple
        Shape of every view.
    views : list of numpy.ndarray
    n_out : int
        Number of outputs of ``fn``.

    Returns
    -------
    list of numpy.ndarray
        ``n_out`` float64 arrays of ``shape``.
    """
    out = [np.empty(shape) for _ in range(n_out)]
    for sl, flat in _flat_blocks(shape, views):
        res = fn(flat)
        bshape = out[0][sl].shape
        for o, r in zip(out, res):
            o[sl] = r.reshape(bshape)
    return out


def _solve_block(Hd, W, phi, psi, b, Cfix, T_guess, max_iter):
    """Solve one block of 1-D contiguous arrays (see :func:`solve_enthalpy`); Hd in J m-3.

    ``Cfix`` is the heat capacity of everything that does not change phase, J m-3 K-1: the
    solids ``(1 - phi) c_s``, plus (for the change-driven rule) ice already present and liquid
    that the rule leaves alone. ``W`` is the water that may change phase along the curve.

    Returns (T, liq)."""
    psi = np.abs(psi)
    K = Cfix + _CV_ICE_WE * W                     # capacity with all of W frozen, J m-3 K-1
    LW = _LV * W                                  # latent content of all the water, J m-3
    lk = np.minimum(W, phi)                       # liquid content at the kink
    Llk = _LV * lk
    Ck = K + _DCV * lk                            # capacity between the kink and T_f
    c1 = np.log((LATENT_HEAT_FUSION / GRAVITY) / psi)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        zk = -b * np.log(lk / phi) - c1           # z at the kink: x_k = (lk / phi)^-b >= 1
        sk = T_FREEZE / (1.0 + np.exp(-zk))       # depression at the kink, K
        # branches 1-3 without masks: 1 -> first term, 2 -> T_f, 3 -> second term
        T = (T_FREEZE + np.maximum(Hd - LW, 0.0) / (K + _DCV * W)
             + np.minimum(Hd - Llk, 0.0) / Ck)
        liq = np.minimum(np.maximum(Hd * (1.0 / _LV), lk), W)
        # keep branch-3 states exactly on the curve despite round-off at the kink (fmin: the
        # cap is NaN or inf at and above T_f, where it does not apply)
        liq = np.fmin(liq, _liq_max_below(T, phi, psi, b))
    idx = np.flatnonzero(Hd < Llk - Ck * sk)      # branch 4: colder than the kink
    if idx.size:
        phi4, psi4, b4, W4 = phi.take(idx), psi.take(idx), b.take(idx), W.take(idx)
        h4, K4 = Hd.take(idx), K.take(idx)
        T4 = _solve_curve(h4, W4, phi4, b4, K4, Llk.take(idx), c1.take(idx), zk.take(idx),
                          None if T_guess is None else T_guess.take(idx), max_iter)
        T[idx], liq[idx] = _settle_on_curve(T4, h4, W4, phi4, psi4, b4, K4)
    return T, liq


def _settle_on_curve(T, h, W, phi, psi, b, K):
    """Final (T, liq) of branch 4: exact energy without leaving the curve.

    Near T_f the liquid content is so sensitive to T that one float64 step of T (5.7e-14 K)
    can change H by more than the round-off of H. So T is moved, one representable number at
    a time, to the warm side of the root, where the liquid content that gives exactly h,
    l_e = (h + K s) / (rho_w L_f - dC s), lies at or below the curve value l_c(T); the state
    is then (T, l_e): energy exact to round-off, liquid never above the supercooled limit and
    below it by at most the effect of one step of T.
    """
    lk = np.minimum(W, phi)
    s = T_FREEZE - T
    lc = _liq_max_below(T, phi, psi, b, cap=lk)
    le = (h + K * s) / (_LV - _DCV * s)
    i = np.flatnonzero(le > lc)                     # cells on the cold side of the root
    for _ in range(16):                             # (Halley leaves T within a few steps)
        if i.size == 0:
            break
        Ti = np.nextafter(T[i], np.inf)
        si = T_FREEZE - Ti
        lci = _liq_max_below(Ti, phi[i], psi[i], b[i], cap=lk[i])
        lei = (h[i] + K[i] * si) / (_LV - _DCV * si)
        T[i], lc[i], le[i] = Ti, lci, lei
        i = i[lei > lci]
    return T, np.maximum(np.minimum(le, lc), 0.0)


def _solve_curve(Hd, W, phi, b, K, Llk, c1, zk, T_guess, max_iter):
    """Safeguarded Halley iteration in z = ln(s / (T_f - s)) for branch 4 of solve_enthalpy.

    With e = exp(-z), s = T_f / (1 + e), q = ds/dz = s e / (1 + e), l = phi exp(-(c1 + z)/b),
    lat = L - dC s (L = rho_w L_f, dC = rho_w (c_w - c_i)):

        F   = l lat - K s - Hd
        F'  = -(K + dC l) q - l lat / b
        F'' = 2 dC l q / b - (K + dC l) q (1 - 2 s / T_f) + l lat / b^2

    Bracket: F(z_k) > 0 at the kink; since h <= -K s + L l_k on this branch,
    s_hi = (L l_k - Hd) / K (capped at T_f / 2) gives F(z_hi) <= 0.
    """
    Tf = T_FREEZE
    s_hi = np.minimum((Llk - Hd) / K, 0.5 * Tf)
    z_hi = np.log(s_hi / (Tf - s_hi))
    z_lo = zk
    if T_guess is not None:
        sg = Tf - T_guess
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.log(sg / (Tf - sg))
        z = np.where((z > z_lo) & (z < z_hi), z, z_lo)
    else:
        z = z_lo.copy()
    tolF = 1e-15 * (_LV * W + K * s_hi + np.abs(Hd))   # round-off level of h, J m-3
    out = np.empty_like(Hd)
    act = None                                         # indices of active cells (None: all)
    inv_b = 1.0 / b
    for _ in range(max_iter):
        e = np.exp(-z)
        r = 1.0 / (1.0 + e)
        s = Tf * r
        q = s * e * r
        l = phi * np.exp(-(c1 + z) * inv_b)
        lat = _LV - _DCV * s
        Kl = K + _DCV * l
        Klq = Kl * q
        llat = l * lat
        llat_b = llat * inv_b
        F = llat - K * s - Hd
        d1 = -Klq - llat_b
        d2 = (2.0 * _DCV) * l * q * inv_b - Klq * (1.0 - (2.0 / Tf) * s) + llat_b * inv_b
        pos = F > 0
        z_lo = np.where(pos, z, z_lo)
        z_hi = np.where(pos, z_hi, z)
        zn = z - 2.0 * F * d1 / (2.0 * d1 * d1 - F * d2)
        bad = ~((zn > z_lo) & (zn < z_hi))
        if bad.any():
            zn = np.where(bad, 0.5 * (z_lo + z_hi), zn)
        small = np.abs(F) <= tolF
        if small.any():
            zn = np.where(small, z, zn)
        # Halley converges cubically: after a Halley step of relative size <= 1e-6 the error
        # is ~1e-18, so that step is the last one (bisection steps never end the iteration).
        done = small | (~bad & (np.abs(zn - z) <= 1e-6 * np.maximum(1.0, np.abs(z))))
        z = zn
        ndone = np.count_nonzero(done)
        if ndone == done.size:
            break
        if 2 * ndone >= done.size:      # compact the active set when half of it is done
            keep = ~done
            sel = np.flatnonzero(done) if act is None else act[done]
            out[sel] = Tf - Tf / (1.0 + np.exp(-z[done]))
            act = np.flatnonzero(keep) if act is None else act[keep]
            z, z_lo, z_hi = z[keep], z_lo[keep], z_hi[keep]
            Hd, phi, inv_b, K, c1, tolF = (Hd[keep], phi[keep], inv_b[keep], K[keep],
                                           c1[keep], tolF[keep])
    Tz = Tf - Tf / (1.0 + np.exp(-z))
    if act is None:
        return Tz
    out[act] = Tz
    return out
