"""Other horizontal factors: the elevation ramp, the land weight, and the coverage check that fails
clearly when a region holds no grid point.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from initgen.errors import InputError, InputWarning
from initgen.science.regions.mask import _float_arg, _raised_cosine_rise
from initgen.text import number


def elevation_ramp(elevation_m, min_m, ramp_m=0.0, max_m=None, max_ramp_m=0.0):
    """Weights from surface elevation: an elevation band with raised-cosine ramps.

    The weight is 0 below ``min_m``, rises as a raised cosine (not linearly) to 1 at
    ``min_m + ramp_m``, stays 1, and if ``max_m`` is given falls symmetrically, from 1 at
    ``max_m - max_ramp_m`` to 0 at ``max_m``, and is 0 above. With a zero ramp the edge is
    a step that includes the limit (``elevation >= min_m``, ``elevation <= max_m``).

    Parameters
    ----------
    elevation_m : array_like
        Surface elevation in m; NaN gives weight 0.
    min_m : float or None
        Lower limit in m (None: no lower limit).
    ramp_m : float, default 0
        Width of the rise above ``min_m``, >= 0.
    max_m : float, optional
        Upper limit in m.
    max_ramp_m : float, default 0
        Width of the fall below ``max_m``, >= 0.

    Returns
    -------
    numpy.ndarray of float64, in [0, 1]

    References
    ----------
    Harris, F. J. (1978). On the use of windows for harmonic analysis with the discrete
    Fourier transform. Proceedings of the IEEE 66(1), 51-83 (raised-cosine taper).
    """
    def num(name, v, allow_none=False):
        if v is None and allow_none:
            return None
        v = _float_arg(v, f"elevation {name}")
        if not math.isfinite(v):
            raise InputError(f"elevation {name} must be finite, got {number(v)}")
        return v

    lo = num("min_m", min_m, allow_none=True)
    hi = num("max_m", max_m, allow_none=True)
    r_lo = num("ramp_m", ramp_m)
    r_hi = num("max_ramp_m", max_ramp_m)
    if r_lo < 0 or r_hi < 0:
        raise InputError(f"elevation ramps must be >= 0 m, got ramp_m={number(r_lo)}, "
                         f"max_ramp_m={number(r_hi)}")
    if lo is not None and hi is not None:
        if hi <= lo:
            raise InputError(f"elevation max_m ({number(hi)}) must be above min_m ({number(lo)})")
        if lo + r_lo > hi - r_hi:
            raise InputError(f"elevation ramps overlap: min_m + ramp_m = {number(lo + r_lo)} "
                             f"is above max_m - max_ramp_m = {number(hi - r_hi)}; shorten the "
                             f"ramps or widen the band")
    z = np.asarray(elevation_m, dtype=np.float64)
    w = np.where(np.isnan(z), 0.0, 1.0)
    with np.errstate(invalid="ignore"):
        if lo is not None:
            w = w * (_raised_cosine_rise((z - lo) / r_lo) if r_lo > 0
                     else (z >= lo).astype(np.float64))
        if hi is not None:
            w = w * (_raised_cosine_rise((hi - z) / r_hi) if r_hi > 0
                     else (z <= hi).astype(np.float64))
    return np.where(np.isnan(z), 0.0, w)


def land_weight(fraction=None, mask=None, threshold=0.5):
    """Weights from a land-area fraction or a land mask.

    Parameters
    ----------
    fraction : array_like, optional
        Land-area fraction (0..1): clipped to [0, 1], NaN gives 0. Values above 1.5 look
        like percent and raise :class:`InputError`.
    mask : array_like, optional
        Land mask: 1 where ``mask >= threshold``, else 0 (NaN gives 0).
    threshold : float, default 0.5

    Returns
    -------
    numpy.ndarray of float64, in [0, 1]
    """
    if (fraction is None) == (mask is None):
        raise InputError("land_weight needs exactly one of 'fraction' (land-area fraction) "
                         "or 'mask' (land mask)")
    if fraction is not None:
        f = np.asarray(fraction, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            if np.nanmax(f, initial=0.0) > 1.5:
                raise InputError(f"land fraction reaches {number(np.nanmax(f))}, above 1; if "
                                 f"it is in percent, divide by 100")
        return np.where(np.isnan(f), 0.0, np.clip(f, 0.0, 1.0))
    threshold = _float_arg(threshold, "land mask threshold")
    m = np.asarray(mask, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return (m >= threshold).astype(np.float64)


def check_coverage(mask, region_name, lon, lat):
    """Fail clearly when a region holds no grid point; warn when it holds fewer than 10.

    Parameters
    ----------
    mask : array_like of bool
        Hard mask (or weights: points with a weight > 0 count).
    region_name : str
        Name used in the message.
    lon, lat : array_like
        Grid coordinates, to describe the grid's extent in the message.

    Returns
    -------
    int
        Number of grid points in the region.

    Raises
    ------
    InputError
        "region 'X' contains no grid point; the grid spans lon A..B, lat C..D".
    """
    n = int(np.count_nonzero(np.nan_to_num(np.asarray(mask, dtype=np.float64)) > 0))
    if n == 0:
        lon = np.asarray(lon, dtype=np.float64)
        lat = np.asarray(lat, dtype=np.float64)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            span = (f"lon {number(np.nanmin(lon))}..{number(np.nanmax(lon))}, "
                    f"lat {number(np.nanmin(lat))}..{number(np.nanmax(lat))}")
        raise InputError(f"region '{region_name}' contains no grid point; the grid spans "
                         f"{span}; check the region's coordinates or enlarge it")
    if n < 10:
        warnings.warn(f"region '{region_name}' contains only {n} grid point"
                      f"{'s' if n > 1 else ''}; the perturbation will be very local",
                      InputWarning, stacklevel=2)
    return n
