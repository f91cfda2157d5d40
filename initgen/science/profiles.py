"""Vertical scaling of a surface anomaly through the soil layers: f(z), pure numpy.

A surface anomaly ``A`` becomes ``f(z) * A`` at depth ``z`` (metres, positive down). The
profile kinds are

``'uniform'``
    ``f(z) = 1`` (a definition).
``'exponential'``
    ``f(z) = exp(-z / e)`` with an e-folding depth ``e`` in metres (a definition).
``'linear'``
    ``f(z) = max(1 - z / z0, 0)``: 1 at the surface, 0 at and below ``z0`` metres (a
    definition).
``'table'``
    ``f`` interpolated linearly between given ``(depth_m, factor)`` pairs and held constant
    beyond the first and last depths (a definition). Table factors may be any finite
    number (negative, or above 1, to reverse or amplify the anomaly at depth).
``'damping'``
    ``f(z) = exp(-z / d)``: the amplitude ratio of a periodic surface temperature wave
    conducted into a homogeneous semi-infinite solid, with damping depth
    ``d = sqrt(kappa P / pi)`` (Carslaw and Jaeger 1959, Conduction of Heat in Solids,
    2nd ed., the semi-infinite solid with a periodic surface temperature, section 2.6, the
    section number recalled; Hillel 1982, Introduction to Soil Physics). Only the amplitude
    ratio is used; the phase lag ``z / d`` (radians) is not.

Each kind can be evaluated at the layer nodes (``evaluate='node'``) or averaged over each
layer's depth range (``evaluate='layer_mean'``), the latter exactly (closed-form integrals).
Apart from ``'table'``, factors lie in [0, 1].
"""

from __future__ import annotations

import math
from numbers import Real

import numpy as np

from initgen.errors import InputError
from initgen.science.layers import Layers, _first_not_increasing

__all__ = ["KINDS", "EVALUATE", "damping_depth_m", "factor"]

#: The profile kinds understood by :func:`factor`.
KINDS = ("uniform", "exponential", "linear", "table", "damping")
#: The evaluation modes understood by :func:`factor`.
EVALUATE = ("node", "layer_mean")

# parameters each kind needs (all others must be left as None)
_NEEDS = {
    "uniform": (),
    "exponential": ("efolding_m",),
    "linear": ("zero_at_m",),
    "table": ("table",),
    "damping": ("diffusivity_m2_s", "period_s"),
}
_PARAMS = ("efolding_m", "zero_at_m", "table", "diffusivity_m2_s", "period_s")


def _positive_number(value, key: str, what: str) -> float:
    """Return `value` as a float > 0, or raise InputError naming `key`."""
    if value is None:
        raise InputError(f"{key}: required; give {what} (a number > 0)")
    if isinstance(value, bool) or not isinstance(value, (Real, np.floating, np.integer)):
        raise InputError(f"{key}: must be a number > 0 ({what}), got {value!r}")
    v = float(value)
    if not math.isfinite(v) or v <= 0.0:
        raise InputError(f"{key}: must be a finite number > 0 ({what}), got {value!r}")
    return v


def damping_depth_m(diffusivity_m2_s, period_s):
    """Damping depth of a periodic surface temperature wave in a homogeneous soil.

    ``d = sqrt(2 kappa / omega) = sqrt(kappa P / pi)``, with ``omega = 2 pi / P``
    (Carslaw and Jaeger 1959, Conduction of Heat in Solids, 2nd ed., section 2.6;
    Hillel 1982, Introduction to Soil Physics). The amplitude of the wave falls to
    ``exp(-z / d)`` of its surface value at depth ``z``.

    Parameters
    ----------
    diffusivity_m2_s : float or array_like
        Thermal diffusivity ``kappa`` in m2 s-1 (> 0). Soils range about 1e-7 to 1e-6.
    period_s : float or array_like
        Period ``P`` of the surface forcing in seconds (> 0): 86400 for the daily cycle,
        365.25 * 86400 for the annual one.

    Returns
    -------
    float or numpy.ndarray
        Damping depth ``d`` in metres; a float when both inputs are scalars, otherwise the
        broadcast array.

    Raises
    ------
    InputError
        If a value is missing, not finite or not > 0 (the message names the parameter).

    Examples
    --------
    >>> round(damping_depth_m(5.0e-7, 86400.0), 3)
    0.117
    """
    out = []
    for key, val, what in (
        ("diffusivity_m2_s", diffusivity_m2_s, "the soil thermal diffusivity in m2/s"),
        ("period_s", period_s, "the forcing period in seconds"),
    ):
        if val is None:
            raise InputError(f"{key}: required; give {what} (a number > 0)")
        try:
            arr = np.asarray(val, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(f"{key}: must be a number > 0 ({what}), got {val!r}") from None
        if not np.all(np.isfinite(arr)) or np.any(arr <= 0.0):
            raise InputError(f"{key}: must be finite and > 0 ({what}), got {val!r}")
        out.append(arr)
    d = np.sqrt(out[0] * out[1] / np.pi)
    return float(d) if d.ndim == 0 else d


def _parse_table(table) -> tuple[np.ndarray, np.ndarray]:
    """Return (depths, factors) from a table of (depth_m, factor) pairs."""
    if isinstance(table, dict):
        raise InputError(
            "table: give a list of [depth_m, factor] pairs ordered by depth, not a mapping"
        )
    try:
        arr = np.array(table, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(
            f"table: must be a list of [depth_m, factor] pairs of numbers, got {table!r}"
        ) from None
    if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 1:
        raise InputError(
            "table: must be a non-empty list of [depth_m, factor] pairs "
            f"(got an array of shape {arr.shape})"
        )
    bad = np.flatnonzero(~np.all(np.isfinite(arr), axis=1))
    if bad.size:
        raise InputError(f"table: entry {int(bad[0])} is not finite ({arr[bad[0]].tolist()})")
    depth, val = arr[:, 0], arr[:, 1]
    i = _first_not_increasing(depth)
    if i is not None:
        raise InputError(
            f"table: depth at entry {i} ({depth[i]:g} m) is not below the depth at entry "
            f"{i - 1} ({depth[i - 1]:g} m); list the pairs with depths strictly increasing"
        )
    return depth, val


def _table_primitive(z: np.ndarray, depth: np.ndarray, val: np.ndarray) -> np.ndarray:
    """Exact integral from depth[0] to z of the piecewise-linear table, constant beyond ends."""
    seg = np.concatenate([[0.0], np.cumsum(0.5 * (val[:-1] + val[1:]) * np.diff(depth))])
    k = np.clip(np.searchsorted(depth, z, side="right") - 1, 0, depth.size - 1)
    fz = np.interp(z, depth, val)
    inside = (z >= depth[0]) & (z <= depth[-1])
    below_first = z < depth[0]
    # inside: area of whole segments up to k, plus the trapezoid from depth[k] to z
    out = np.where(inside, seg[k] + 0.5 * (val[k] + fz) * (z - depth[k]), 0.0)
    out = np.where(below_first, (z - depth[0]) * val[0], out)
    out = np.where(z > depth[-1], seg[-1] + (z - depth[-1]) * val[-1], out)
    return out


def factor(
    kind: str,
    layers,
    *,
    efolding_m=None,
    zero_at_m=None,
    table=None,
    diffusivity_m2_s=None,
    period_s=None,
    evaluate: str = "node",
    max_depth_m=None,
) -> np.ndarray:
    """Vertical scaling factor for each layer.

    Profiles (``z`` depth in metres, positive down):

    - ``'uniform'``: ``f = 1`` (definition).
    - ``'exponential'``: ``f = exp(-z / efolding_m)`` (definition).
    - ``'linear'``: ``f = max(1 - z / zero_at_m, 0)`` (definition).
    - ``'table'``: linear interpolation of ``[(depth_m, factor), ...]``, constant beyond the
      first and last depths (definition). Factors may be any finite number.
    - ``'damping'``: ``f = exp(-z / d)``, ``d = sqrt(kappa P / pi)`` in metres, kappa in
      m2 s-1 and P in s: the amplitude ratio of a periodic surface temperature wave in a
      semi-infinite conducting solid (Carslaw and Jaeger 1959, section 2.6; Hillel 1982).
      The phase lag is not used.

    Layer means (``evaluate='layer_mean'``) are ``(1 / (b - a)) * integral_a^b f(z) dz`` over
    each layer ``[a, b] = [top_m, bottom_m]``, in closed form:

    - uniform: 1;
    - exponential and damping (``e`` the e-folding or damping depth):
      ``e (exp(-a/e) - exp(-b/e)) / (b - a)``;
    - linear, with ``c = clip(b, a, max(a, z0))`` (the kink at ``z0`` handled exactly):
      ``(c - a) (1 - (a + c) / (2 z0)) / (b - a)``;
    - table: the exact integral of the piecewise-linear function (trapezoids between the
      table depths, rectangles beyond the ends).

    Parameters
    ----------
    kind : {'uniform', 'exponential', 'linear', 'table', 'damping'}
        Profile shape.
    layers : Layers or array_like
        The layer geometry; or, for ``evaluate='node'`` only, a 1-D array of depths (m, >= 0)
        at which to evaluate.
    efolding_m : float, optional
        e-folding depth in metres (> 0); required for ``'exponential'``, unused otherwise.
    zero_at_m : float, optional
        Depth in metres (> 0) at which ``'linear'`` reaches 0; required for ``'linear'``.
    table : sequence of (float, float), optional
        ``[(depth_m, factor), ...]`` with depths strictly increasing; required for
        ``'table'``.
    diffusivity_m2_s, period_s : float, optional
        Thermal diffusivity (m2 s-1, > 0) and forcing period (s, > 0); both required for
        ``'damping'``.
    evaluate : {'node', 'layer_mean'}, optional
        Evaluate at the layer nodes (default) or average over each layer.
    max_depth_m : float, optional
        If given (> 0), the factor is 0 below this depth: at nodes deeper than it, and, for
        ``'layer_mean'``, the part of a layer below it contributes 0 to the mean.

    Returns
    -------
    numpy.ndarray
        Float64 factors, shape ``(n_layers,)``. In [0, 1] for every kind except ``'table'``.

    Raises
    ------
    InputError
        Unknown `kind` or `evaluate`; a required parameter missing, not finite or not > 0; a
        parameter given that the kind does not use; a malformed table; depths that are not
        finite or are negative. Each message names the parameter.
    """
    if kind not in KINDS:
        raise InputError(f"kind: unknown profile {kind!r}; use one of {', '.join(KINDS)}")
    if evaluate not in EVALUATE:
        raise InputError(f"evaluate: unknown mode {evaluate!r}; use 'node' or 'layer_mean'")
    given = {
        "efolding_m": efolding_m,
        "zero_at_m": zero_at_m,
        "table": table,
        "diffusivity_m2_s": diffusivity_m2_s,
        "period_s": period_s,
    }
    for key in _PARAMS:
        if given[key] is not None and key not in _NEEDS[kind]:
            users = [k for k, need in _NEEDS.items() if key in need]
            raise InputError(
                f"{key}: not used by kind={kind!r} (it belongs to kind={users[0]!r}); "
                "remove it or change the kind"
            )
    max_depth = (
        None if max_depth_m is None
        else _positive_number(max_depth_m, "max_depth_m", "the depth below which the factor is 0")
    )

    # --- the profile: pointwise f(z) and the exact integral I(a, c) = int_a^c f dz, c >= a
    if kind == "uniform":
        def f(z):
            return np.ones_like(z)

        def integral(a, c):
            return c - a
    elif kind in ("exponential", "damping"):
        if kind == "exponential":
            e = _positive_number(efolding_m, "efolding_m", "the e-folding depth in metres")
        else:
            _positive_number(diffusivity_m2_s, "diffusivity_m2_s",
                             "the soil thermal diffusivity in m2/s")
            _positive_number(period_s, "period_s", "the forcing period in seconds")
            e = damping_depth_m(diffusivity_m2_s, period_s)

        def f(z):
            return np.exp(-z / e)

        def integral(a, c):
            # e (exp(-a/e) - exp(-c/e)) written with expm1 to keep thin layers accurate
            return -e * np.exp(-a / e) * np.expm1(-(c - a) / e)
    elif kind == "linear":
        z0 = _positive_number(zero_at_m, "zero_at_m", "the depth in metres where the factor reaches 0")

        def f(z):
            return np.maximum(1.0 - z / z0, 0.0)

        def integral(a, c):
            c2 = np.clip(c, a, np.maximum(a, z0))
            return (c2 - a) * (1.0 - (a + c2) / (2.0 * z0))
    else:  # table
        if table is None:
            raise InputError("table: required for kind='table'; give [[depth_m, factor], ...]")
        depth, val = _parse_table(table)

        def f(z):
            return np.interp(z, depth, val)

        def integral(a, c):
            return _table_primitive(c, depth, val) - _table_primitive(a, depth, val)

    # --- evaluate
    if isinstance(layers, Layers):
        if evaluate == "layer_mean":
            layers.require_interfaces("evaluate: layer_mean (the profile averaged over each layer)")
        nodes, top, bottom = layers.node_m, layers.top_m, layers.bottom_m
    else:
        if evaluate == "layer_mean":
            raise InputError(
                "layers: evaluate='layer_mean' needs a Layers object (with top and bottom "
                "depths), not bare depths"
            )
        try:
            nodes = np.array(layers, dtype=np.float64).reshape(-1)
        except (TypeError, ValueError):
            raise InputError(f"layers: must be a Layers or a 1-D array of depths, got {layers!r}") from None
        if not np.all(np.isfinite(nodes)) or np.any(nodes < 0.0):
            raise InputError("layers: depths must be finite and >= 0 (metres, positive down)")
        top = bottom = None

    if evaluate == "node":
        out = np.asarray(f(nodes), dtype=np.float64)
        if max_depth is not None:
            out = np.where(nodes > max_depth, 0.0, out)
    else:
        c = bottom if max_depth is None else np.clip(max_depth, top, bottom)
        out = integral(top, c) / (bottom - top)
        if kind != "table":
            # closed forms can overshoot [0, 1] by an ulp; the exact means cannot
            out = np.clip(out, 0.0, 1.0)
    return np.array(out, dtype=np.float64) + 0.0  # + 0.0 turns -0.0 into 0.0
