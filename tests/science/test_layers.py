"""Tests for initgen.science.layers: constructors, units, orientation, validation, snow/soil split."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from initgen.errors import InputError
from initgen.science.layers import Layers, split_snow_soil, units_to_metres


def test_from_interfaces_nodes_at_midpoints():
    lay = Layers.from_interfaces([0.0, 0.1, 0.3, 0.7])
    np.testing.assert_array_equal(lay.top_m, [0.0, 0.1, 0.3])
    np.testing.assert_array_equal(lay.bottom_m, [0.1, 0.3, 0.7])
    np.testing.assert_allclose(lay.node_m, [0.05, 0.2, 0.5], rtol=0, atol=1e-15)
    np.testing.assert_allclose(lay.thickness_m, [0.1, 0.2, 0.4], rtol=0, atol=1e-15)
    assert len(lay) == lay.n == 3
    np.testing.assert_array_equal(lay.interfaces_m, [0.0, 0.1, 0.3, 0.7])


def test_from_nodes_documented_construction():
    # hand computation of the documented rule: interior interfaces halfway between nodes,
    # top at 0, bottom mirrored so that the last node is the mid-point of its layer
    lay = Layers.from_nodes([0.02, 0.1, 0.3])
    np.testing.assert_allclose(lay.top_m, [0.0, 0.06, 0.2], atol=1e-15)
    np.testing.assert_allclose(lay.bottom_m, [0.06, 0.2, 0.4], atol=1e-15)
    np.testing.assert_array_equal(lay.node_m, [0.02, 0.1, 0.3])
    single = Layers.from_nodes([0.5])
    np.testing.assert_array_equal(single.bottom_m, [1.0])


def test_round_trip_nodes_interfaces_thicknesses():
    interfaces = np.array([0.0, 0.1, 0.2, 0.3, 0.4])  # equal layers: nodes are mid-points
    a = Layers.from_interfaces(interfaces)
    b = Layers.from_nodes(a.node_m)
    c = Layers.from_thicknesses(a.thickness_m)
    for other in (b, c):
        np.testing.assert_allclose(other.top_m, a.top_m, atol=1e-15)
        np.testing.assert_allclose(other.bottom_m, a.bottom_m, atol=1e-15)
        np.testing.assert_allclose(other.node_m, a.node_m, atol=1e-15)
    # from_nodes keeps the nodes exactly
    nodes = [0.0071, 0.0279, 0.0623, 0.1189, 0.2122]
    np.testing.assert_array_equal(Layers.from_nodes(nodes).node_m, nodes)


@settings(max_examples=50, deadline=None)
@given(st.lists(st.floats(min_value=1e-3, max_value=10.0), min_size=1, max_size=20))
def test_round_trip_thickness_interfaces_property(thick):
    a = Layers.from_thicknesses(thick)
    b = Layers.from_interfaces(a.interfaces_m)
    assert a == b
    np.testing.assert_allclose(b.thickness_m, thick, rtol=1e-12, atol=1e-12)
    assert np.all(a.top_m[1:] == a.bottom_m[:-1])  # contiguous


@pytest.mark.parametrize("units,scale", [("cm", 100.0), ("centimeters", 100.0),
                                         ("mm", 1000.0), ("Millimetres", 1000.0),
                                         ("meters", 1.0), (" m ", 1.0)])
def test_units(units, scale):
    ref = Layers.from_interfaces([0.0, 0.1, 0.3])
    got = Layers.from_interfaces(np.array([0.0, 0.1, 0.3]) * scale, units=units)
    np.testing.assert_allclose(got.bottom_m, ref.bottom_m, rtol=1e-15)
    np.testing.assert_allclose(Layers.from_nodes([5.0, 15.0], units="cm").node_m, [0.05, 0.15])
    np.testing.assert_allclose(Layers.from_thicknesses([10.0, 20.0], units="cm").bottom_m,
                               [0.1, 0.3])
    assert units_to_metres("CM") == 0.01


def test_unknown_units_names_argument():
    with pytest.raises(InputError, match=r"soil_depth: unknown depth units 'kg'; use a length"):
        Layers.from_nodes([1.0, 2.0], units="kg", name="soil_depth")
    with pytest.raises(InputError, match=r"soil_depth: unknown depth units 'm2'"):
        Layers.from_nodes([1.0, 2.0], units="m2", name="soil_depth")


def test_any_udunits_length_converts():
    # the international foot is exactly 0.3048 m (NIST SP 811, 2008, appendix B.8; the value
    # UDUNITS-2 carries): a depth in feet is converted, not refused, as the CF conventions read units
    assert Layers.from_nodes([1.0, 2.0], units="ft").node_m.tolist() == pytest.approx([0.3048, 0.6096], rel=1e-15)
    assert units_to_metres("kilometres") == 1000.0 and units_to_metres(" Millimeters ") == 0.001


def test_positive_up_and_autodetect():
    ref = Layers.from_interfaces([0.0, 0.1, 0.3])
    assert Layers.from_interfaces([0.0, -0.1, -0.3], positive="up") == ref
    assert Layers.from_interfaces([0.0, -0.1, -0.3]) == ref  # auto-detected
    assert Layers.from_interfaces([0.0, -10.0, -30.0], units="cm") == Layers.from_interfaces(
        [0.0, 10.0, 30.0], units="cm")
    assert Layers.from_nodes([-0.05, -0.2]) == Layers.from_nodes([0.05, 0.2])
    assert Layers.from_thicknesses([-0.1, -0.2], positive="up") == Layers.from_thicknesses([0.1, 0.2])
    assert Layers.from_interfaces([0.0, 0.1, 0.3], positive="down") == ref
    # all-negative values are heights even when the file claims positive='down'
    assert Layers.from_interfaces([0.0, -0.1, -0.3], positive="down") == ref
    assert Layers.from_nodes([-0.05, -0.2], positive="DOWN") == Layers.from_nodes([0.05, 0.2])
    # mixed signs are not auto-detected: the order check reports the index
    with pytest.raises(InputError, match="index 2"):
        Layers.from_interfaces([0.0, 0.1, -0.3])
    with pytest.raises(InputError, match="positive='up'"):
        Layers.from_interfaces([0.0, 0.1, 0.3], positive="up")
    with pytest.raises(InputError, match="positive='sideways'"):
        Layers.from_interfaces([0.0, 0.1], positive="sideways")


def test_non_monotonic_rejected_with_index():
    with pytest.raises(InputError, match=r"^soil_z: .*index 2"):
        Layers.from_nodes([0.1, 0.3, 0.2], name="soil_z")
    with pytest.raises(InputError, match=r"^interfaces: .*index 1"):
        Layers.from_interfaces([0.0, 0.0, 0.5])
    with pytest.raises(InputError, match=r"^dz: thickness at index 1"):
        Layers.from_thicknesses([0.1, 0.0], name="dz")
    with pytest.raises(InputError, match=r"^nodes: value at index 1 is not finite"):
        Layers.from_nodes([0.1, np.nan])
    with pytest.raises(InputError, match=r"index 0"):
        Layers.from_nodes([0.0, 0.1])  # a node at the surface cannot start a layer at 0
    with pytest.raises(InputError, match="at least two"):
        Layers.from_interfaces([0.0])
    with pytest.raises(InputError, match="1-D"):
        Layers.from_nodes([[0.1, 0.2]])
    masked = np.ma.masked_array([0.1, 0.2], mask=[False, True])
    with pytest.raises(InputError, match="index 1"):
        Layers.from_nodes(masked)


def test_messages_are_one_line():
    with pytest.raises(InputError) as err:
        Layers.from_nodes([0.1, 0.3, 0.2], name="soil_z")
    assert "\n" not in str(err.value)


def test_direct_construction_validates_and_is_frozen():
    lay = Layers([0.0, 0.1], [0.1, 0.3], [0.05, 0.2])
    with pytest.raises(ValueError):
        lay.top_m[0] = 1.0  # arrays are read-only
    with pytest.raises(AttributeError):
        lay.top_m = np.zeros(2)  # frozen dataclass
    assert lay.top_m.dtype == np.float64
    with pytest.raises(InputError, match="node of layer 1"):
        Layers([0.0, 0.1], [0.1, 0.3], [0.05, 0.4])
    with pytest.raises(InputError, match="overlap"):
        Layers([0.0, 0.1], [0.2, 0.3], [0.05, 0.2])
    with pytest.raises(InputError, match="same length"):
        Layers([0.0], [0.1, 0.2], [0.05])
    assert hash(lay) == hash(Layers([0.0, 0.1], [0.1, 0.3], [0.05, 0.2]))


def test_split_snow_soil():
    snow, soil = split_snow_soil(5, 20)
    axis = np.arange(20)
    np.testing.assert_array_equal(axis[snow], np.arange(5))
    np.testing.assert_array_equal(axis[soil], np.arange(5, 20))
    snow, soil = split_snow_soil(0, 3)
    assert axis[:3][snow].size == 0 and axis[:3][soil].size == 3
    with pytest.raises(InputError, match="n_snow"):
        split_snow_soil(4, 3)
    with pytest.raises(InputError, match="n_total"):
        split_snow_soil(1, -1)
    with pytest.raises(InputError, match="n_snow"):
        split_snow_soil(1.5, 3)


# ---------------------------------------------------------------------------------------------
# resolve_layers and depth ranges in names (issue 14): definitions, checked by hand computation
# ---------------------------------------------------------------------------------------------

from initgen.science.layers import depth_range_in_text, resolve_layers  # noqa: E402


@pytest.mark.parametrize("text, expect", [
    ("soil_temperature_0_10cm", (0.0, 0.1)),
    ("Soil temperature 10-40 cm", (0.1, 0.4)),
    ("tsl 0.28 to 1.0 m", (0.28, 1.0)),
    ("t_100_289mm", (0.1, 0.289)),
    ("tsoil", None),
    ("layer 40_10cm", None),             # bottom above top
    ("0-10cm and 10-40cm", None),        # two ranges: ambiguous
    ("t2m", None),
])
def test_depth_range_in_text(text, expect):
    got = depth_range_in_text(text)
    if expect is None:
        assert got is None
    else:
        np.testing.assert_allclose(got, expect, rtol=0, atol=1e-15)


def test_resolve_nodes_and_thickness_keeps_the_thickness():
    lay = resolve_layers([("node", [0.05, 0.25, 0.7], "nodes"), ("thickness", [0.1, 0.3, 0.6], "dz")])
    np.testing.assert_allclose(lay.interfaces_m, [0.0, 0.1, 0.4, 1.0], atol=1e-15)
    np.testing.assert_array_equal(lay.node_m, [0.05, 0.25, 0.7])
    assert lay.source[1] == "top/bottom from thicknesses from dz stacked from the surface; node from nodes"


def test_resolve_refuses_disagreeing_sources_naming_both():
    with pytest.raises(InputError, match="node of layer 1 at 0.45 m by nodes lies outside.*by thicknesses from dz"):
        resolve_layers([("node", [0.05, 0.45, 0.7], "nodes"), ("thickness", [0.1, 0.3, 0.6], "dz")])
    with pytest.raises(InputError, match=r"layer 1 is 0\.3 m thick by dz but 0\.2 m .* by bnds"):
        resolve_layers([("interface", [0, 0.1, 0.3, 1.0], "bnds"), ("thickness", [0.1, 0.3, 0.7], "dz")])
    with pytest.raises(InputError, match="bnds describes 3 layers but names describes 2 layers"):
        resolve_layers([("interface", [0, 0.1, 0.3, 1.0], "bnds"), ("top_bottom", [[0, .1], [.1, .3]], "names")])
    # agreeing sources (float32 rounding of a depth) are accepted
    lay = resolve_layers([("interface", np.float32([0, 0.1, 0.3]), "a"), ("top_bottom", [[0, .1], [.1, .3]], "b")])
    assert lay.n == 2


def test_resolve_never_guesses_interfaces():
    lay = resolve_layers([("node", [0.05, 0.15], "lev")])
    assert not lay.interfaces_known
    with pytest.raises(InputError, match="only node depths are known.*midpoints_between_nodes"):
        lay.thickness_m
    asked = resolve_layers([("node", [0.05, 0.15], "lev")], midpoints=True)
    np.testing.assert_allclose(asked.interfaces_m, [0.0, 0.1, 0.2], atol=1e-15)
    assert "asks midpoints_between_nodes" in asked.source[0]
