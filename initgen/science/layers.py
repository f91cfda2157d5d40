"""Soil (and snow) layer geometry: node depths, interfaces and thicknesses.

Everything here is plain numpy. Depths are in metres and positive downward from the ground
surface. A :class:`Layers` holds, per layer, the depth of its top and bottom interfaces and of
its node (the depth at which the model carries the layer's temperature). The constructors
accept depths as a file or a layout gives them: in metres, centimetres or millimetres, and
positive downward or upward (heights, that is negative depths).

No published formula is used in this module; the constructions below are definitions, stated
in each docstring.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from initgen.errors import InputError
from initgen.science import units as units_mod

__all__ = ["Layers", "resolve_layers", "depth_range_in_text", "split_snow_soil", "units_to_metres"]

#: Spellings accepted for the ``units`` argument, mapped to the factor that converts to metres.
def units_to_metres(units: str, *, name: str = "units") -> float:
    """Return the factor that converts a length in `units` to metres.

    Parameters
    ----------
    units : str
        Any length unit UDUNITS-2 knows (``'m'``, ``'cm'``, ``'mm'``, ``'km'``, ``'ft'`` ...), in any
        of its spellings (``'meters'``, ``'centimetres'``; case and surrounding blanks are ignored),
        parsed by :func:`initgen.science.units.metres_per`, the one unit parser of initgen.
    name : str, optional
        Name of the argument or variable the units belong to, used in error messages.

    Returns
    -------
    float
        Metres per unit (1.0, 0.01, 0.001, 0.3048 ...).

    Raises
    ------
    InputError
        If the units are not a length.

    Examples
    --------
    >>> units_to_metres("centimetres")
    0.01
    """
    factor = units_mod.metres_per(units)
    if factor is None or not factor > 0:
        raise InputError(
            f"{name}: unknown depth units {units!r}; use a length such as 'm', 'cm' or 'mm' "
            "(or a spelling such as 'meters', 'centimetres')"
        )
    return factor


def _as_1d(values, name: str) -> np.ndarray:
    """Return `values` as a new 1-D float64 array (masked entries become NaN)."""
    if isinstance(values, np.ma.MaskedArray):
        values = np.ma.filled(values.astype(np.float64), np.nan)
    try:
        arr = np.array(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{name}: depths must be numbers; got {values!r}") from None
    if arr.ndim != 1:
        raise InputError(
            f"{name}: expected a 1-D sequence of depths, got an array of shape {arr.shape}"
        )
    if arr.size == 0:
        raise InputError(f"{name}: no depths given; give at least one layer")
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        i = int(bad[0])
        raise InputError(
            f"{name}: value at index {i} is not finite ({arr[i]}); "
            "fill in every depth (missing values are not allowed)"
        )
    return arr


def _to_depth_m(values, units: str, positive: str | None, name: str) -> np.ndarray:
    """Convert user depths to metres, positive downward.

    Values that are all <= 0 with at least one < 0 are heights (positive upward) whatever
    `positive` says, since soil depths cannot lie above the surface: they are negated.
    ``positive='up'`` with any value > 0 is an error.
    """
    raw = _as_1d(values, name)
    arr = raw * units_to_metres(units, name=name)
    p = "down" if positive is None else str(positive).strip().lower()
    if p not in ("down", "up"):
        raise InputError(
            f"{name}: positive={positive!r} is not understood; use 'down' (depths) or "
            "'up' (heights, negative below the surface)"
        )
    up = p == "up" or bool(np.all(arr <= 0.0) and np.any(arr < 0.0))
    if p == "up" and np.any(arr > 0.0):
        i = int(np.flatnonzero(arr > 0.0)[0])
        raise InputError(
            f"{name}: positive='up' but the value at index {i} is above the surface "
            f"({raw[i]:g} {units}); give heights <= 0 or use positive='down'"
        )
    if up:
        arr = -arr
    deep = np.flatnonzero(np.abs(arr) > MAX_DEPTH_M)
    if deep.size:
        i = int(deep[0])
        raise InputError(
            f"{name}: value at index {i} ({raw[i]:g} {units}) lies more than {MAX_DEPTH_M:g} m from the "
            "surface, which no soil layer does; check the units, or a fill value among the depths"
        )
    # -0.0 -> 0.0 so that round trips compare equal and print cleanly
    return arr + 0.0


#: Deepest soil depth (and largest thickness) accepted, m; the recipe's max_depth_m has the same
#: bound. Deeper values are a units slip or an undeclared fill value (1e20, 9.97e36).
MAX_DEPTH_M = 1000.0


def _first_not_increasing(arr: np.ndarray) -> int | None:
    """The first index at which a 1-D array does not strictly increase.

    Parameters
    ----------
    arr : numpy.ndarray
        1-D values (depths), any length.

    Returns
    -------
    int or None
        The smallest ``i >= 1`` with ``arr[i] <= arr[i - 1]``; None when the array strictly
        increases (or has fewer than two values).
    """
    bad = np.flatnonzero(np.diff(arr) <= 0.0)
    return int(bad[0]) + 1 if bad.size else None


def _check_increasing(arr: np.ndarray, name: str, what: str = "depth") -> None:
    """Raise InputError naming the first index where `arr` does not strictly increase."""
    if arr.size < 2:
        return
    i = _first_not_increasing(arr)
    if i is not None:
        raise InputError(
            f"{name}: {what} at index {i} ({arr[i]:g} m) is not below the {what} at index "
            f"{i - 1} ({arr[i - 1]:g} m); give {what}s strictly increasing downward "
            "(or set positive='up' for heights)"
        )


@dataclass(frozen=True, eq=False)
class Layers:
    """Vertical geometry of a stack of layers, depth positive down, in metres.

    Parameters
    ----------
    top_m : numpy.ndarray
        Depth of each layer's upper interface, shape ``(n,)``.
    bottom_m : numpy.ndarray
        Depth of each layer's lower interface, shape ``(n,)``.
    node_m : numpy.ndarray
        Depth of each layer's node (where the model carries its state), shape ``(n,)``.

    Notes
    -----
    The arrays are copied to float64 and made read-only. Validation: all finite, tops >= 0,
    thickness ``bottom - top`` > 0, tops and nodes strictly increasing, each node within its
    layer, and layers do not overlap (``bottom[i] <= top[i+1]``, with a relative tolerance
    of 1e-9 for rounding). Errors are :class:`~initgen.errors.InputError`.

    Two ``Layers`` compare equal when all three arrays are equal element by element.
    """

    top_m: np.ndarray
    bottom_m: np.ndarray
    node_m: np.ndarray
    source: tuple = ()

    def __post_init__(self) -> None:
        arrays = {}
        unknown = _all_nan(self.top_m) and _all_nan(self.bottom_m)
        for field in ("top_m", "bottom_m", "node_m"):
            if unknown and field != "node_m":
                arr = np.full(np.shape(self.top_m), np.nan)
            else:
                arr = _as_1d(getattr(self, field), f"Layers.{field}")
            arr.setflags(write=False)
            arrays[field] = arr
        top, bottom, node = arrays["top_m"], arrays["bottom_m"], arrays["node_m"]
        if not (top.shape == bottom.shape == node.shape):
            raise InputError(
                f"Layers: top_m, bottom_m and node_m must have the same length; got "
                f"{top.size}, {bottom.size} and {node.size}"
            )
        if unknown:
            _check_increasing(node, "Layers (node_m)", "node depth")
            if node[0] < 0.0:
                raise InputError(f"Layers: node of layer 0 is above the surface ({node[0]:g} m)")
        else:
            _validate_geometry(top, bottom, node, "Layers")
        for field, arr in arrays.items():
            object.__setattr__(self, field, arr)
        src = tuple(str(x) for x in (self.source or ()))
        if src and len(src) != node.size:
            src = (src[0],) * node.size if len(src) == 1 else src
        if src and len(src) != node.size:
            raise InputError(f"Layers: {len(src)} source descriptions for {node.size} layers")
        object.__setattr__(self, "source", src or ("given",) * node.size)

    @property
    def interfaces_known(self) -> bool:
        """False when only node depths are known (top_m and bottom_m are then NaN)."""
        return bool(np.all(np.isfinite(self.top_m)))

    def require_interfaces(self, why: str) -> None:
        """Raise InputError unless the layer interfaces are known; `why` says who needs them."""
        if not self.interfaces_known:
            raise InputError(
                f"{why} needs the soil layer interfaces, but only node depths are known "
                f"({self.source[0]}); give the interfaces (a CF bounds variable, "
                "roles.layer_interface_depth or roles.layer_thickness in the layout), or, to place them "
                "halfway between the nodes, set 'interfaces: midpoints_between_nodes' in the layout"
            )

    # ------------------------------------------------------------------ properties
    @property
    def thickness_m(self) -> np.ndarray:
        """Layer thickness ``bottom_m - top_m`` in metres, shape ``(n,)``.

        Raises InputError when the interfaces are not known (see :meth:`require_interfaces`).
        """
        self.require_interfaces("the layer thickness")
        out = self.bottom_m - self.top_m
        out.setflags(write=False)
        return out

    @property
    def n(self) -> int:
        """Number of layers."""
        return int(self.node_m.size)

    @property
    def interfaces_m(self) -> np.ndarray:
        """The ``n + 1`` interface depths ``[top_m[0], bottom_m[0], ..., bottom_m[-1]]``.

        Only meaningful for contiguous layers (``bottom[i] == top[i+1]``), which every
        constructor of this module produces.
        """
        self.require_interfaces("the layer interfaces")
        out = np.concatenate([self.top_m[:1], self.bottom_m])
        out.setflags(write=False)
        return out

    def __len__(self) -> int:
        return self.n

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Layers):
            return NotImplemented
        return bool(
            np.array_equal(self.top_m, other.top_m, equal_nan=True)
            and np.array_equal(self.bottom_m, other.bottom_m, equal_nan=True)
            and np.array_equal(self.node_m, other.node_m)
        )

    def __hash__(self) -> int:
        return hash((self.top_m.tobytes(), self.bottom_m.tobytes(), self.node_m.tobytes()))

    def __repr__(self) -> str:
        return (
            f"Layers(n={self.n}, top_m={self.top_m.tolist()}, bottom_m={self.bottom_m.tolist()}, "
            f"node_m={self.node_m.tolist()})"
        )

    # ------------------------------------------------------------------ constructors
    @classmethod
    def from_nodes(
        cls, nodes, *, units: str = "m", positive: str | None = "down", name: str = "nodes"
    ) -> "Layers":
        """Build layers from node depths alone.

        Construction (a definition, not a published formula): the top of the first layer is
        the surface (0 m); each interior interface lies halfway between two consecutive nodes,
        ``z_{i+1/2} = (z_i + z_{i+1}) / 2``; the bottom of the last layer is extrapolated
        symmetrically so that the last node sits at the middle of its layer,
        ``bottom = 2 z_{n-1} - z_{n-3/2}`` (for a single node, ``bottom = 2 z_0``).

        Parameters
        ----------
        nodes : array_like
            Node depths, shape ``(n,)``, strictly increasing downward; the first must be
            below the surface (> 0).
        units : str, optional
            Units of `nodes`: ``'m'`` (default), ``'cm'``, ``'mm'`` or a spelling such as
            ``'meters'``.
        positive : {'down', 'up'}, optional
            ``'down'`` (default): values are depths; ``'up'``: values are heights (<= 0 below
            the surface) and are negated. Auto-detection: values that are all <= 0 (and not
            all zero) are taken as heights whatever `positive` says, since soil depths cannot
            lie above the surface (files often store depths as negative heights without a
            ``positive`` attribute). ``None`` is accepted as ``'down'``.
        name : str, optional
            Name of the variable or recipe key the values came from, used in error messages.

        Returns
        -------
        Layers

        Raises
        ------
        InputError
            Non-finite values, unknown units, depths not strictly increasing (the message
            gives the index), or a first node at or above the surface.
        """
        z = _to_depth_m(nodes, units, positive, name)
        _check_increasing(z, name, "node depth")
        if z[0] <= 0.0:
            raise InputError(
                f"{name}: the first node (index 0, {z[0]:g} m) must be below the surface "
                "(> 0) so that the first layer can start at 0 m; give node depths, not "
                "interface depths (use from_interfaces for those)"
            )
        interior = 0.5 * (z[:-1] + z[1:])
        top = np.concatenate([[0.0], interior])
        bottom = np.concatenate([interior, [2.0 * z[-1] - top[-1]]])
        return cls(top, bottom, z, (f"interfaces halfway between the nodes of {name} (asked for by name); node from {name}",))

    @classmethod
    def from_interfaces(
        cls, interfaces, *, units: str = "m", positive: str | None = "down",
        name: str = "interfaces",
    ) -> "Layers":
        """Build layers from the ``n + 1`` interface depths; nodes at the layer mid-points.

        Parameters
        ----------
        interfaces : array_like
            Interface depths, shape ``(n + 1,)``, strictly increasing downward and >= 0
            (usually starting at 0).
        units, positive, name
            As for :meth:`from_nodes`.

        Returns
        -------
        Layers
            With ``node_m = (top_m + bottom_m) / 2``.

        Raises
        ------
        InputError
            Fewer than two values, non-finite values, unknown units, depths not strictly
            increasing (the message gives the index) or a negative first depth.
        """
        z = _to_depth_m(interfaces, units, positive, name)
        if z.size < 2:
            raise InputError(
                f"{name}: need at least two interface depths (top and bottom of one layer), "
                f"got {z.size}"
            )
        _check_increasing(z, name, "interface depth")
        if z[0] < 0.0:
            raise InputError(
                f"{name}: the first interface (index 0, {z[0]:g} m) is above the surface; "
                "give depths >= 0 (snow layers belong on their own axis, see split_snow_soil)"
            )
        return cls(z[:-1], z[1:], 0.5 * (z[:-1] + z[1:]), (f"interfaces from {name}; node at the layer middle",))

    @classmethod
    def from_thicknesses(
        cls, thickness, *, units: str = "m", positive: str | None = "down",
        name: str = "thickness",
    ) -> "Layers":
        """Build layers by stacking thicknesses downward from the surface (0 m).

        Interfaces are the cumulative sums ``[0, t_0, t_0 + t_1, ...]``; nodes are at the
        layer mid-points.

        Parameters
        ----------
        thickness : array_like
            Layer thicknesses, shape ``(n,)``, each > 0. Files whose vertical axis points up
            sometimes store them negative: those are accepted with ``positive='up'`` or when
            all values are negative (auto-detection).
        units, positive, name
            As for :meth:`from_nodes`.

        Returns
        -------
        Layers

        Raises
        ------
        InputError
            Non-finite values, unknown units, or a thickness <= 0 (the message gives the
            index).
        """
        t = _to_depth_m(thickness, units, positive, name)
        bad = np.flatnonzero(t <= 0.0)
        if bad.size:
            i = int(bad[0])
            raise InputError(
                f"{name}: thickness at index {i} is {t[i]:g} m; every layer must be thicker "
                "than 0"
            )
        interfaces = np.concatenate([[0.0], np.cumsum(t)])
        return cls(interfaces[:-1], interfaces[1:], 0.5 * (interfaces[:-1] + interfaces[1:]),
                   (f"thicknesses from {name} stacked from the surface; node at the layer middle",))


def _all_nan(values) -> bool:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        return False
    return arr.ndim == 1 and arr.size > 0 and bool(np.all(np.isnan(arr)))


def _validate_geometry(top: np.ndarray, bottom: np.ndarray, node: np.ndarray, name: str) -> None:
    """Check a stack of layers; raise InputError naming `name` and the offending index."""
    if top[0] < 0.0:
        raise InputError(
            f"{name}: top of layer 0 is above the surface ({top[0]:g} m); depths must be >= 0"
        )
    thick = bottom - top
    bad = np.flatnonzero(thick <= 0.0)
    if bad.size:
        i = int(bad[0])
        raise InputError(
            f"{name}: layer {i} has thickness {thick[i]:g} m (top {top[i]:g}, bottom "
            f"{bottom[i]:g}); every layer must be thicker than 0"
        )
    _check_increasing(top, f"{name} (top_m)", "top depth")
    _check_increasing(node, f"{name} (node_m)", "node depth")
    outside = np.flatnonzero((node < top) | (node > bottom))
    if outside.size:
        i = int(outside[0])
        raise InputError(
            f"{name}: node of layer {i} ({node[i]:g} m) lies outside the layer "
            f"[{top[i]:g}, {bottom[i]:g}] m; check the node and interface depths"
        )
    if top.size > 1:
        tol = 1e-9 * np.maximum(np.abs(bottom[:-1]), 1.0)
        overlap = np.flatnonzero(bottom[:-1] > top[1:] + tol)
        if overlap.size:
            i = int(overlap[0]) + 1
            raise InputError(
                f"{name}: layer {i} starts at {top[i]:g} m, above the bottom of layer {i - 1} "
                f"({bottom[i - 1]:g} m); layers must not overlap"
            )


#: Two depths from different sources agree when they differ by less than this (m): 1 micrometre
#: plus 1e-6 relative, far below any layer thickness and above float32 rounding of a depth in cm.
_AGREE_ABS_M = 1.0e-6
_AGREE_REL = 1.0e-6

_RANGE = re.compile(
    r"(?<![\d.])(\d+(?:\.\d+)?)\s*(?:-|_|to|\u2013)\s*(\d+(?:\.\d+)?)\s*(mm|cm|m)(?![a-z])",
    re.IGNORECASE,
)


def depth_range_in_text(text) -> tuple[float, float] | None:
    """The layer depth range written in a variable name or long_name, in metres, or None.

    Recognises ``<top><sep><bottom><units>`` with ``sep`` one of ``-``, ``_``, ``to`` (blanks
    allowed) and units ``mm``, ``cm`` or ``m``: ``"tsoil_0_10cm"`` -> (0.0, 0.1),
    ``"Soil temperature 10-40 cm"`` -> (0.1, 0.4), ``"0.28 to 1.0 m"`` -> (0.28, 1.0). A text
    with no such range, with more than one, or with a range whose bottom is not below its top
    gives None (the caller then has no depth from this source).
    """
    if not text:
        return None
    found = _RANGE.findall(str(text))
    if len(found) != 1:
        return None
    a, b, unit = found[0]
    f = units_to_metres(unit.lower())
    top, bottom = float(a) * f, float(b) * f
    if not bottom > top:
        return None
    return top, bottom


def _agree(a, b) -> np.ndarray:
    a, b = np.asarray(a, float), np.asarray(b, float)
    return np.abs(a - b) <= _AGREE_ABS_M + _AGREE_REL * np.maximum(np.abs(a), np.abs(b))


def _labels(label, n: int) -> list:
    if isinstance(label, (list, tuple)):
        return [str(x) for x in label]
    return [str(label)] * n


def resolve_layers(candidates, *, midpoints: bool = False, name: str = "layers") -> Layers:
    """Layer geometry from every source that describes it, refusing sources that disagree.

    Parameters
    ----------
    candidates : list of (kind, values, label)
        Depth information already in metres, positive down. ``kind`` is ``'node'`` (``(n,)``
        node depths), ``'interface'`` (``(n + 1,)`` interface depths), ``'top_bottom'``
        (``(n, 2)`` top and bottom of each layer, e.g. from CF bounds of per-layer variables or
        depth ranges in their names) or ``'thickness'`` (``(n,)``). ``label`` says where the values
        came from (a string, or one string per layer) and is what messages and
        :attr:`Layers.source` show.
    midpoints : bool, optional
        Only when nothing but node depths is known: place the interfaces halfway between the
        nodes (:meth:`Layers.from_nodes`). Without it the interfaces stay unknown and whatever
        needs them refuses (:meth:`Layers.require_interfaces`). Interfaces are never guessed.
    name : str, optional
        Prefix of error messages (the file or layout).

    Returns
    -------
    Layers
        With a per-layer ``source`` string naming where the top/bottom and the node came from.

    Raises
    ------
    InputError
        Sources of different layer counts, interfaces or thicknesses that disagree by more than
        1e-6 m (+1e-6 relative), or a node outside its layer: the message names both sources.

    Notes
    -----
    Construction (definitions, no published formula): interfaces from interface or top/bottom
    sources; otherwise thicknesses stacked down from the surface (0 m). Nodes from node sources;
    otherwise the layer middle, which the source string says.
    """
    cands = [(k, np.asarray(v, float), lab) for k, v, lab in candidates]
    if not cands:
        raise InputError(f"{name}: no layer depths given")
    counts = []
    for k, v, lab in cands:
        where = f"{name}: {_labels(lab, 1)[0]}"
        if k in ("node", "interface"):
            _check_increasing(v, where, "node depth" if k == "node" else "interface depth")
        elif k == "top_bottom":
            if v.ndim != 2 or v.shape[1] != 2:
                raise InputError(f"{where}: expected a (top, bottom) pair per layer, got shape {v.shape}")
            _check_increasing(v[:, 0], where, "layer top")
        n = v.shape[0] - 1 if k == "interface" else v.shape[0]
        counts.append((n, lab))
    n0, lab0 = counts[0]
    for n, lab in counts[1:]:
        if n != n0:
            raise InputError(f"{name}: {_labels(lab0, 1)[0]} describes {n0} layers but {_labels(lab, 1)[0]} "
                             f"describes {n} layers; the two depth sources disagree: fix or drop one")
    n = n0
    top = bottom = None
    ilab = None
    for k, v, lab in cands:
        if k not in ("interface", "top_bottom"):
            continue
        t, b = (v[:-1], v[1:]) if k == "interface" else (v[:, 0], v[:, 1])
        labs = _labels(lab, n)
        if top is None:
            top, bottom, ilab = t.copy(), b.copy(), labs
            continue
        bad = np.flatnonzero(~(_agree(t, top) & _agree(b, bottom)))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"{name}: layer {i} is {top[i]:g}..{bottom[i]:g} m by {ilab[i]} but {t[i]:g}..{b[i]:g} m "
                             f"by {labs[i]}; the two depth sources disagree: fix or drop one")
    for k, v, lab in cands:
        if k != "thickness":
            continue
        labs = _labels(lab, n)
        if top is None:
            if np.any(v <= 0.0):
                i = int(np.flatnonzero(v <= 0.0)[0])
                raise InputError(f"{name}: thickness of layer {i} from {labs[i]} is {v[i]:g} m; every layer must "
                                 "be thicker than 0")
            z = np.concatenate([[0.0], np.cumsum(v)])
            top, bottom = z[:-1], z[1:]
            ilab = [f"thicknesses from {x} stacked from the surface" for x in labs]
            continue
        bad = np.flatnonzero(~_agree(bottom - top, v))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"{name}: layer {i} is {v[i]:g} m thick by {labs[i]} but {bottom[i] - top[i]:g} m "
                             f"({top[i]:g}..{bottom[i]:g} m) by {ilab[i]}; the thicknesses do not sum to the "
                             "interfaces: fix or drop one")
    node = None
    nlab = None
    for k, v, lab in cands:
        if k != "node":
            continue
        labs = _labels(lab, n)
        if node is None:
            node, nlab = v.copy(), labs
        else:
            bad = np.flatnonzero(~_agree(v, node))
            if bad.size:
                i = int(bad[0])
                raise InputError(f"{name}: node of layer {i} is at {node[i]:g} m by {nlab[i]} but {v[i]:g} m by "
                                 f"{labs[i]}; the two depth sources disagree: fix or drop one")
        if top is not None:
            tol = _AGREE_ABS_M + _AGREE_REL * np.abs(v)
            out = np.flatnonzero((v < top - tol) | (v > bottom + tol))
            if out.size:
                i = int(out[0])
                raise InputError(f"{name}: node of layer {i} at {v[i]:g} m by {labs[i]} lies outside the layer "
                                 f"{top[i]:g}..{bottom[i]:g} m by {ilab[i]}; the two depth sources disagree: fix or "
                                 "drop one")
    if top is None:
        if midpoints:
            made = Layers.from_nodes(node, name=nlab[0])
            return Layers(made.top_m, made.bottom_m, made.node_m,
                          tuple(f"interfaces halfway between the nodes (layout asks midpoints_between_nodes); "
                                f"node from {x}" for x in nlab))
        return Layers(np.full(n, np.nan), np.full(n, np.nan), node,
                      tuple(f"interfaces unknown (only node depths given); node from {x}" for x in nlab))
    if node is None:
        node = 0.5 * (top + bottom)
        nlab = ["the layer middle (no node depth given)"] * n
    else:
        node = np.clip(node, top, bottom)
    if midpoints:
        raise InputError(f"{name}: the layout asks for interfaces halfway between the nodes, but the interfaces are "
                         f"given ({ilab[0]}); drop 'interfaces: midpoints_between_nodes'")
    return Layers(top, bottom, node, tuple(f"top/bottom from {a}; node from {b}" for a, b in zip(ilab, nlab)))


def split_snow_soil(n_snow: int, n_total: int) -> tuple[slice, slice]:
    """Index slices of the snow and soil parts of a combined snow + soil layer axis.

    Some models keep snow and soil layers on one vertical axis, snow stacked above the soil:
    the first `n_snow` entries are snow (top of the pack first) and the rest are soil (from
    the surface down).

    Parameters
    ----------
    n_snow : int
        Number of snow layers at the start of the axis (>= 0).
    n_total : int
        Length of the combined axis (>= n_snow).

    Returns
    -------
    (slice, slice)
        ``(snow, soil)`` = ``(slice(0, n_snow), slice(n_snow, n_total))``. The soil slice is
        empty when ``n_snow == n_total``.

    Raises
    ------
    InputError
        If either count is not a non-negative integer or ``n_snow > n_total``.
    """
    for key, val in (("n_snow", n_snow), ("n_total", n_total)):
        if isinstance(val, bool) or not isinstance(val, (int, np.integer)) or val < 0:
            raise InputError(f"{key}: must be a non-negative integer layer count, got {val!r}")
    if n_snow > n_total:
        raise InputError(
            f"n_snow: {n_snow} snow layers do not fit on an axis of {n_total} layers; "
            "check the layout's snow and soil layer counts"
        )
    return slice(0, int(n_snow)), slice(int(n_snow), int(n_total))
