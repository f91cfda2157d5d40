"""Constants of initgen against their published sources.

Source labels used below:
- "CESM shr_const_mod (confirmed)": value read in published copies of the CESM shared constant
  module shr_const_mod.F90 and listed as confirmed in design/REFERENCES.md.
- "Moene and van Dam 2014, Table 2.2 (confirmed)": de Vries (1963) constituent values as
  tabulated there, confirmed per design/REFERENCES.md.
- "REFERENCES.md texture formula (confirmed)": c_s = (2.128 sand + 2.385 clay)/(sand + clay) 1e6.
- "computed by hand": arithmetic from the values above, written out beside the check.
"""

import ast
import pathlib

import pytest

from initgen.science import constants as K


@pytest.mark.parametrize(
    "name, value, source",
    [
        ("LATENT_HEAT_FUSION", 3.337e5, "CESM shr_const_mod SHR_CONST_LATICE (confirmed)"),
        ("RHO_WATER", 1000.0, "CESM shr_const_mod SHR_CONST_RHOFW (confirmed)"),
        ("RHO_ICE", 917.0, "CESM shr_const_mod SHR_CONST_RHOICE (confirmed)"),
        ("CP_WATER", 4188.0, "CESM shr_const_mod SHR_CONST_CPFW (confirmed)"),
        ("CP_ICE", 2117.27, "CESM shr_const_mod SHR_CONST_CPICE (confirmed)"),
        ("GRAVITY", 9.80616, "CESM shr_const_mod SHR_CONST_G (confirmed)"),
        ("T_FREEZE", 273.15, "CESM shr_const_mod SHR_CONST_TKFRZ (confirmed)"),
        ("CV_QUARTZ_DE_VRIES", 2.13e6, "Moene and van Dam 2014, Table 2.2 (confirmed)"),
        ("CV_CLAY_MINERALS_DE_VRIES", 2.39e6, "Moene and van Dam 2014, Table 2.2 (confirmed)"),
        ("CV_ORGANIC_DE_VRIES", 2.47e6, "Moene and van Dam 2014, Table 2.2 (confirmed)"),
        ("CV_WATER_DE_VRIES", 4.18e6, "Moene and van Dam 2014, Table 2.2 (confirmed)"),
        ("CV_ICE_TABLE", 1.88e6, "Moene and van Dam 2014, Table 2.2, credited there to Lee 1978 (confirmed)"),
        ("CV_SAND_TEXTURE", 2.128e6, "REFERENCES.md texture formula (confirmed)"),
        ("CV_CLAY_TEXTURE", 2.385e6, "REFERENCES.md texture formula (confirmed)"),
        ("CV_ORGANIC_TEXTURE", 2.5e6, "REFERENCES.md texture formula (confirmed)"),
        ("EARTH_RADIUS_M", 6.371e6, "IUGG mean radius as listed in REFERENCES.md (6371.0 km)"),
    ],
)
def test_published_value(name, value, source):
    assert getattr(K, name) == pytest.approx(value, rel=1e-12), source


def test_derived_capacities_computed_by_hand():
    # computed by hand: 1000 kg m-3 * 4188 J kg-1 K-1 = 4.188e6 J m-3 K-1
    assert K.CV_WATER == pytest.approx(4.188e6, rel=1e-12)
    # computed by hand: 917 * 2117.27 = 1 941 536.59 J m-3 K-1
    assert K.CV_ICE == pytest.approx(1941536.59, rel=1e-12)
    # computed by hand: (2.128e6 + 2.385e6) / 2 = 2.2565e6 J m-3 K-1 (documented default)
    assert K.CV_SOLID_DEFAULT == pytest.approx(2.2565e6, rel=1e-12)


def test_module_names_its_constant_set():
    assert "CESM" in K.CONSTANT_SET and "de Vries" in K.CONSTANT_SET
    assert "CESM" in K.__doc__ and "shr_const_mod" in K.__doc__


def test_every_constant_states_its_source():
    """Each module-level constant is preceded by a ``#:`` comment naming a source: a citation
    [n], the words Source/derived/choice, or REFERENCES.md."""
    path = pathlib.Path(K.__file__)
    lines = path.read_text().splitlines()
    tree = ast.parse(path.read_text())
    checked = 0
    for node in tree.body:
        if isinstance(node, ast.Assign) and isinstance(node.targets[0], ast.Name):
            name = node.targets[0].id
            if not name.isupper() or name.startswith("_") or name == "CONSTANT_SET":
                continue
            i = node.lineno - 2
            comment = []
            while i >= 0 and lines[i].startswith("#:"):
                comment.append(lines[i])
                i -= 1
            text = " ".join(comment)
            assert comment, f"{name} has no #: comment"
            assert any(k in text for k in ("Source", "[", "derived", "REFERENCES.md", "choice")), name
            checked += 1
    assert checked == len(K.__all__) - 1  # all but CONSTANT_SET, the name of the set
