"""The solver-dictionary formatter and reader (caseprep.casefiles.foamdict)."""
from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from caseprep.casefiles import foamdict as fd


def test_parse_nested_dict_lists_dimensions_comments():
    text = """
    /* block comment
       over lines */
    FoamFile { version 2.0; format ascii; class volVectorField; object U; }
    dimensions [0 1 -1 0 0 0 0];   // m/s
    internalField uniform (1 0 -2.5e-3);
    boundaryField
    {
        inlet { type fixedValue; value uniform (10 0 0); }
        "(top|sides)" { type slip; }
    }
    patches (body floor);
    #includeEtc "caseDicts/x.cfg"
    functions { f1 { libs ("libforces.so"); } }
    """
    d = fd.parse(text)
    assert d["FoamFile"]["class"] == "volVectorField"
    assert d["dimensions"] == (0, 1, -1, 0, 0, 0, 0) and isinstance(d["dimensions"], fd.Dimensions)
    assert d["internalField"] == ["uniform", [1, 0, -2.5e-3]]
    assert d["boundaryField"]["inlet"]["value"][1] == [10, 0, 0]
    assert d["boundaryField"]["(top|sides)"]["type"] == "slip"
    assert d["patches"] == ["body", "floor"]
    assert d["#includeEtc"] == "caseDicts/x.cfg"
    assert d["functions"]["f1"]["libs"] == ["libforces.so"]


def test_parse_lists_of_named_dicts():
    d = fd.parse("boundary ( inlet { type patch; faces ((0 4 7 3)); } ground { type wall; faces ((0 3 2 1)); } );")
    items = fd.named_items(d["boundary"])
    assert [n for n, _ in items] == ["inlet", "ground"]
    assert items[1][1]["faces"] == [[0, 3, 2, 1]]


@pytest.mark.parametrize("bad", ["a { b 1; ", "a 1", "a (1 2;", "} a 1;"])
def test_syntax_errors_are_reported(bad):
    with pytest.raises(fd.FoamSyntaxError):
        fd.parse(bad)


def test_format_values():
    assert fd.fmt(True) == "true" and fd.fmt(False) == "false"
    assert fd.fmt(3) == "3"
    assert fd.fmt(0.0) == "0"
    assert fd.fmt([1, 2.5, -3e-7]) == "(1 2.5 -3e-07)"
    assert fd.fmt(np.array([1.0, 0.0, 0.0])) == "(1 0 0)"
    assert fd.fmt("body") == "body"
    assert fd.fmt("body.stl") == "body.stl"
    assert fd.fmt("a b") == '"a b"'
    with pytest.raises(ValueError):
        fd.fmt_scalar(math.nan)
    with pytest.raises(ValueError):
        fd.word("bad name")
    with pytest.raises(ValueError):
        fd.word("../x")


@settings(max_examples=200, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False, width=64), min_size=1, max_size=5))
def test_numbers_round_trip(values):
    # 12 significant digits: relative round-trip error below 1e-11 (5e-13 half
    # an ulp of the 12th digit, with margin; common practice, no source).
    text = f"v {fd.fmt_vector(values)};"
    back = fd.parse(text)["v"]
    back = back if isinstance(back, list) else [back]
    for a, b in zip(values, back):
        assert b == pytest.approx(a, rel=1e-11, abs=1e-300)


def test_header_parses():
    d = fd.parse(fd.header("dictionary", "controlDict", "system") + "application simpleFoam;\n")
    assert d["FoamFile"]["object"] == "controlDict"
    assert d["FoamFile"]["location"] == "system"
    assert d["application"] == "simpleFoam"


def test_formatter_does_not_modify_input():
    a = np.array([1.0, 2.0, 3.0])
    a0 = a.copy()
    fd.fmt(a)
    fd.fmt_vector(a)
    np.testing.assert_array_equal(a, a0)
