"""Physical limits applied to the output: clamps that return ``(values, count)`` for the ledger.
"""

from __future__ import annotations

import numpy as np

from initgen.science.constants import T_FREEZE
from initgen.science.soil.properties import _f64


def clamp(values, lower=None, upper=None):
    """Clip values to [lower, upper] and count how many were changed.

    Parameters
    ----------
    values : array_like
    lower, upper : array_like, optional
        Bounds (either may be None). NaN values are left as they are and not counted.

    Returns
    -------
    tuple
        ``(values float64 ndarray, count int)``.
    """
    v = _f64(values)
    changed = np.zeros(v.shape, dtype=bool)
    if lower is not None:
        changed |= v < lower
    if upper is not None:
        changed |= v > upper
    n = int(np.count_nonzero(changed))
    return (np.clip(v, lower, upper) if n else v.copy()), n


def clamp_soil_temperature(T, t_min=180.0, t_max=340.0):
    """Clamp soil temperature to [t_min, t_max] K (recipe defaults 180 K and 340 K).

    Returns
    -------
    tuple
        ``(T K, count clamped up to t_min, count clamped down to t_max)``.
    """
    v, n_low = clamp(T, t_min, None)
    v, n_high = clamp(v, None, t_max)
    return v, n_low, n_high


def clamp_snow_temperature(T, t_max=T_FREEZE):
    """Clamp snow temperature to at most T_f = 273.15 K (snow cannot be warmer than melting).

    Returns
    -------
    tuple
        ``(T K, count of clamped cells)``.
    """
    return clamp(T, None, t_max)
