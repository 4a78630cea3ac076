"""Initial-field files: the solver's ASCII and binary volume fields read
back, a warm start written into a uniform field file with its boundary
conditions kept, the fall-backs to the uniform field (no solution, a
truncated file, a cell count that does not fit)."""
from __future__ import annotations

import json

import numpy as np
import pytest

from caseprep.run import fields

HEAD = ('FoamFile\n{{\n    version     2.0;\n    format      {fmt};\n    arch        "LSB;label=32;scalar=64";\n'
        '    class       {cls};\n    object      {name};\n}}\n')


def binary_field(name: str, values: np.ndarray) -> bytes:
    """A field as the solver writes it with ``writeFormat binary``: the count,
    then the raw little-endian doubles between parentheses."""
    cls, kind = ("volVectorField", "vector") if values.ndim == 2 else ("volScalarField", "scalar")
    head = HEAD.format(fmt="binary", cls=cls, name=name).encode()
    return (head + b"dimensions [0 1 -1 0 0 0 0];\n\ninternalField   nonuniform List<" + kind.encode() + b"> "
            + str(len(values)).encode() + b"(" + values.astype("<f8").tobytes() + b")\n;\n\nboundaryField\n{\n}\n")


def uniform_field(name: str, value: str, vector: bool) -> str:
    cls = "volVectorField" if vector else "volScalarField"
    return (HEAD.format(fmt="ascii", cls=cls, name=name) + "dimensions [0 1 -1 0 0 0 0];\n\n"
            f"internalField   uniform {value};\n\nboundaryField\n{{\n    inlet\n    {{\n        type fixedValue;\n"
            f"        value uniform {value};\n    }}\n}}\n")


@pytest.fixture
def pair(tmp_path):
    """A solved source (binary fields at time 120) and a target with uniform 0/ files, 4 cells each."""
    rng = np.random.default_rng(3)
    src, dst = tmp_path / "src", tmp_path / "dst"
    U = rng.normal(30.0, 5.0, (4, 3))
    p = rng.normal(0.0, 100.0, 4)
    k = np.array([0.5, 0.0, 0.2, 0.1])  # one cell at zero: "outside the source"
    for case in (src, dst):
        (case / "0").mkdir(parents=True)
        (case / "logs").mkdir()
        (case / "0" / "U").write_text(uniform_field("U", "(40 0 0)", True))
        (case / "0" / "p").write_text(uniform_field("p", "0", False))
        (case / "0" / "k").write_text(uniform_field("k", "0.06", False))
    (src / "120").mkdir()
    (src / "120" / "U").write_bytes(binary_field("U", U))
    (src / "120" / "p").write_bytes(binary_field("p", p))
    (src / "120" / "k").write_bytes(binary_field("k", k))
    return src, dst, U, p, k


def test_binary_and_ascii_fields_read_back(pair, tmp_path):
    src, dst, U, p, k = pair
    assert np.array_equal(fields.read_internal(src / "120" / "U"), U)
    assert np.array_equal(fields.read_internal(src / "120" / "p"), p)
    assert fields.read_internal(dst / "0" / "U") == (40.0, 0.0, 0.0)
    assert fields.read_internal(dst / "0" / "p") == 0.0
    text = fields.with_internal((dst / "0" / "U").read_text(), U)
    (tmp_path / "U").write_text(text)
    assert np.allclose(fields.read_internal(tmp_path / "U"), U, rtol=1e-8, atol=0)  # written to 9 significant digits: half a unit of the 9th is 5e-9
    assert "value uniform (40 0 0);" in text


def test_copied_warm_start_scales_and_keeps_the_boundaries(pair):
    src, dst, U, p, k = pair
    done = fields.prepare(dst, "copied", src, speed_ratio=0.5)
    assert done == {"kind": "copied", "source_time": "120", "fields": ["U", "k", "p"]}
    # similarity: U ∝ r, p ∝ r², k ∝ r² (caseprep.run.fields)
    assert np.allclose(fields.read_internal(dst / "0" / "U"), 0.5 * U, rtol=1e-8)
    assert np.allclose(fields.read_internal(dst / "0" / "p"), 0.25 * p, rtol=1e-8, atol=1e-9)
    k0 = fields.read_internal(dst / "0" / "k")
    assert k0[1] == 0.06 and np.allclose(k0[[0, 2, 3]], 0.25 * k[[0, 2, 3]])  # the zero cell gets the free stream
    for name in ("U", "p", "k"):
        assert "inlet" in (dst / "0" / name).read_text()
    # the uniform files are kept, and a cold start restores them
    assert (dst / fields.UNIFORM_DIR / "U").read_text() == uniform_field("U", "(40 0 0)", True)
    assert fields.prepare(dst, "uniform") == {"kind": "uniform"}
    assert fields.read_internal(dst / "0" / "U") == (40.0, 0.0, 0.0)


def test_fall_backs_to_the_uniform_field(pair):
    src, dst, U, p, k = pair
    # a truncated source file
    (src / "120" / "p").write_bytes(binary_field("p", p)[:-40])  # cut into the values
    done = fields.prepare(dst, "copied", src)
    assert done["kind"] == "uniform" and "cold start" in done["why"] and "shorter or malformed" in done["why"]
    assert fields.read_internal(dst / "0" / "U") == (40.0, 0.0, 0.0)  # nothing half-written left behind
    # a mesh of another size
    (src / "120" / "p").write_bytes(binary_field("p", p))
    poly = dst / "constant" / "polyMesh"
    poly.mkdir(parents=True)
    (poly / "owner").write_text('FoamFile\n{\n    note "nPoints:10  nCells:7  nFaces:20  nInternalFaces:5";\n}\n')
    done = fields.prepare(dst, "copied", src)
    assert done["kind"] == "uniform" and "for a mesh of 7 cells" in done["why"]
    # no solution at all
    for f in (src / "120").iterdir():
        f.unlink()
    (src / "120").rmdir()
    done = fields.prepare(dst, "copied", src)
    assert done["kind"] == "uniform" and "no solution folder" in done["why"]


def test_the_command_line_entry_writes_its_result(pair):
    src, dst, *_ = pair
    assert fields.main([str(dst), "--kind", "copied", "--source", str(src), "--speed-ratio", "2"]) == 0
    done = json.loads((dst / "logs" / fields.RESULT_NAME).read_text())
    assert done["kind"] == "copied" and done["source_time"] == "120"


def test_malformed_field_is_a_field_error(tmp_path):
    p = tmp_path / "U"
    p.write_text("FoamFile\n{\n format ascii;\n}\ninternalField nonsense;\n")
    with pytest.raises(fields.FieldError, match="expected a uniform value"):
        fields.read_internal(p)
