"""A tiny real case for the solver tests and for producing the log fixtures.

Builds a one-case sweep folder that follows the case folder contract
(manifest.json, cases.txt, cases/<id>/run.sh with the stages mesh, solve and
export): a 1 m × 0.4 m × 0.3 m channel over a stationary ground with a small
box-shaped body (an STL written here) meshed by the background mesher plus
the surface-snapping mesher with two prism layers, solved laminar and steady
for a few dozen iterations, exported to VTK. A few thousand cells, seconds of
solver time on one rank.

Variants (``variant=``):
    ``ok``         the normal case.
    ``collapsed``  layer settings that cannot be met (minimum thickness above
                   the layer thickness), so every layer is removed.
    ``crash``      an impossible relaxation set-up that blows up the solver.

Run as a script to (re)build the case in a folder and run it::

    python tests/tiny_case.py /tmp/tiny --variant ok --run
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

import numpy as np

_HERE = Path(__file__).resolve().parent
if str(_HERE.parent) not in sys.path:  # running as a script from a source tree
    sys.path.insert(0, str(_HERE.parent))

from caseprep.contract.frames import place_body  # noqa: E402
from caseprep.contract.manifest import CaseRecord, Manifest, Reference, write_manifest  # noqa: E402

HEADER = """FoamFile
{{
    version 2.0;
    format ascii;
    class {cls};
    object {obj};
}}
"""

BODY = ((0.30, 0.50), (-0.08, 0.08), (0.05, 0.13))  # x, y, z extents of the box body (m)


def _box_stl(name: str, ext) -> str:
    """ASCII STL of an axis-aligned box, outward normals, two triangles a face."""
    (x0, x1), (y0, y1), (z0, z1) = ext
    v = np.array([[x0, y0, z0], [x1, y0, z0], [x1, y1, z0], [x0, y1, z0],
                  [x0, y0, z1], [x1, y0, z1], [x1, y1, z1], [x0, y1, z1]])
    quads = [(0, 3, 2, 1), (4, 5, 6, 7), (0, 1, 5, 4), (2, 3, 7, 6), (1, 2, 6, 5), (3, 0, 4, 7)]
    out = [f"solid {name}"]
    for a, b, c, d in quads:
        for tri in ((a, b, c), (a, c, d)):
            p = v[list(tri)]
            n = np.cross(p[1] - p[0], p[2] - p[0])
            n = n / np.linalg.norm(n)
            out.append(f"  facet normal {n[0]:g} {n[1]:g} {n[2]:g}\n    outer loop")
            out += [f"      vertex {q[0]:g} {q[1]:g} {q[2]:g}" for q in p]
            out.append("    endloop\n  endfacet")
    out.append(f"endsolid {name}")
    return "\n".join(out) + "\n"


def _files(variant: str, n_iter: int) -> dict[str, str]:
    h = lambda cls, obj: HEADER.format(cls=cls, obj=obj)  # noqa: E731
    min_thickness = "1.5" if variant == "collapsed" else "0.1"
    relax_p = "1.6" if variant == "crash" else "0.3"
    relax_u = "1.5" if variant == "crash" else "0.7"
    files = {}
    files["system/controlDict"] = h("dictionary", "controlDict") + f"""
application simpleFoam;
startFrom startTime;
startTime 0;
stopAt endTime;
endTime {n_iter};
deltaT 1;
writeControl timeStep;
writeInterval {n_iter};
purgeWrite 0;
writeFormat ascii;
writePrecision 8;
timeFormat general;
timePrecision 6;
runTimeModifiable false;
"""
    files["system/fvSchemes"] = h("dictionary", "fvSchemes") + """
ddtSchemes { default steadyState; }
gradSchemes { default Gauss linear; }
divSchemes
{
    default none;
    div(phi,U) bounded Gauss linearUpwind grad(U);
    div((nuEff*dev2(T(grad(U))))) Gauss linear;
}
laplacianSchemes { default Gauss linear limited corrected 0.5; }
interpolationSchemes { default linear; }
snGradSchemes { default limited corrected 0.5; }
wallDist { method meshWave; }
"""
    files["system/fvSolution"] = h("dictionary", "fvSolution") + f"""
solvers
{{
    p {{ solver GAMG; smoother GaussSeidel; tolerance 1e-7; relTol 0.05; }}
    U {{ solver smoothSolver; smoother symGaussSeidel; tolerance 1e-8; relTol 0.1; }}
}}
SIMPLE
{{
    nNonOrthogonalCorrectors 0;
    consistent false;
    residualControl {{ p 1e-5; U 1e-6; }}
}}
relaxationFactors
{{
    fields {{ p {relax_p}; }}
    equations {{ U {relax_u}; }}
}}
"""
    files["system/decomposeParDict"] = h("dictionary", "decomposeParDict") + """
numberOfSubdomains 2;
method simple;
coeffs { n (2 1 1); }
"""
    files["system/blockMeshDict"] = h("dictionary", "blockMeshDict") + """
scale 1;
vertices
(
    (0 -0.2 0) (1 -0.2 0) (1 0.2 0) (0 0.2 0)
    (0 -0.2 0.3) (1 -0.2 0.3) (1 0.2 0.3) (0 0.2 0.3)
);
blocks ( hex (0 1 2 3 4 5 6 7) (20 8 6) simpleGrading (1 1 1) );
boundary
(
    inlet { type patch; faces ((0 4 7 3)); }
    outlet { type patch; faces ((1 2 6 5)); }
    ground { type wall; faces ((0 3 2 1)); }
    farfield { type patch; faces ((4 5 6 7) (0 1 5 4) (3 7 6 2)); }
);
"""
    files["system/snappyHexMeshDict"] = h("dictionary", "snappyHexMeshDict") + f"""
castellatedMesh true;
snap true;
addLayers true;
geometry
{{
    body.stl {{ type triSurfaceMesh; name body; }}
}}
castellatedMeshControls
{{
    maxLocalCells 200000;
    maxGlobalCells 400000;
    minRefinementCells 0;
    maxLoadUnbalance 0.10;
    nCellsBetweenLevels 2;
    features ();
    refinementSurfaces
    {{
        body {{ level (1 1); patchInfo {{ type wall; }} }}
    }}
    resolveFeatureAngle 30;
    refinementRegions {{}}
    locationInMesh (0.05 0.013 0.21);
    allowFreeStandingZoneFaces true;
}}
snapControls
{{
    nSmoothPatch 3;
    tolerance 2.0;
    nSolveIter 30;
    nRelaxIter 5;
    nFeatureSnapIter 10;
    implicitFeatureSnap true;
    explicitFeatureSnap false;
    multiRegionFeatureSnap false;
}}
addLayersControls
{{
    relativeSizes true;
    layers {{ body {{ nSurfaceLayers 2; }} }}
    expansionRatio 1.2;
    finalLayerThickness 0.4;
    minThickness {min_thickness};
    nGrow 0;
    featureAngle 130;
    slipFeatureAngle 30;
    nRelaxIter 3;
    nSmoothSurfaceNormals 1;
    nSmoothNormals 3;
    nSmoothThickness 10;
    maxFaceThicknessRatio 0.5;
    maxThicknessToMedialRatio 0.3;
    minMedialAxisAngle 90;
    nBufferCellsNoExtrude 0;
    nLayerIter 50;
}}
meshQualityControls
{{
    maxNonOrtho 65;
    maxBoundarySkewness 20;
    maxInternalSkewness 4;
    maxConcave 80;
    minVol 1e-13;
    minTetQuality 1e-15;
    minArea -1;
    minTwist 0.02;
    minDeterminant 0.001;
    minFaceWeight 0.05;
    minVolRatio 0.01;
    minTriangleTwist -1;
    nSmoothScale 4;
    errorReduction 0.75;
    relaxed {{ maxNonOrtho 75; }}
}}
mergeTolerance 1e-6;
"""
    files["constant/transportProperties"] = h("dictionary", "transportProperties") + """
transportModel Newtonian;
nu 1e-3;
"""
    files["constant/turbulenceProperties"] = h("dictionary", "turbulenceProperties") + """
simulationType laminar;
"""
    files["0/U"] = h("volVectorField", "U") + """
dimensions [0 1 -1 0 0 0 0];
internalField uniform (1 0 0);
boundaryField
{
    inlet { type fixedValue; value uniform (1 0 0); }
    outlet { type inletOutlet; inletValue uniform (0 0 0); value uniform (1 0 0); }
    ground { type noSlip; }
    farfield { type slip; }
    body { type noSlip; }
}
"""
    files["0/p"] = h("volScalarField", "p") + """
dimensions [0 2 -2 0 0 0 0];
internalField uniform 0;
boundaryField
{
    inlet { type zeroGradient; }
    outlet { type fixedValue; value uniform 0; }
    ground { type zeroGradient; }
    farfield { type slip; }
    body { type zeroGradient; }
}
"""
    files["constant/triSurface/body.stl"] = _box_stl("body", BODY)
    files["run.sh"] = RUN_SH
    return files


# The stage script: the case folder contract (stages mesh, solve, export;
# UF_RANKS ranks; logs/<tool>.log; logs/<stage>.done; first failure exits).
RUN_SH = r"""#!/bin/bash
# Tiny test case: ./run.sh [mesh] [solve] [export]  (no arguments: all three)
set -u
cd "$(dirname "$0")" || exit 1
export WM_PROJECT_DIR="${WM_PROJECT_DIR:-/usr/share/openfoam}"
RANKS="${UF_RANKS:-1}"
MPI="mpirun --allow-run-as-root --oversubscribe -np $RANKS"
mkdir -p logs
tool() {  # tool NAME CMD...: run CMD, log to logs/NAME.log, stop the script on failure
    local name="$1"; shift
    "$@" > "logs/$name.log" 2>&1 || { echo "run.sh: $name failed (see logs/$name.log)" >&2; exit 1; }
}
stage_mesh() {
    rm -f logs/mesh.done
    tool blockMesh blockMesh
    tool snappyHexMesh snappyHexMesh -overwrite
    tool checkMesh checkMesh
    touch logs/mesh.done
}
stage_solve() {
    rm -f logs/solve.done
    if [ "$RANKS" -gt 1 ]; then
        sed -i "s/^numberOfSubdomains .*/numberOfSubdomains $RANKS;/; s/^coeffs .*/coeffs { n ($RANKS 1 1); }/" system/decomposeParDict
        rm -rf processor*
        tool decomposePar decomposePar
        tool simpleFoam $MPI simpleFoam -parallel
        tool reconstructPar reconstructPar -latestTime
    else
        tool simpleFoam simpleFoam
    fi
    touch logs/solve.done
}
stage_export() {
    rm -f logs/export.done
    tool foamToVTK foamToVTK -latestTime
    touch logs/export.done
}
[ $# -eq 0 ] && set -- mesh solve export
for s in "$@"; do
    case "$s" in
        mesh) stage_mesh ;;
        solve) stage_solve ;;
        export) stage_export ;;
        *) echo "run.sh: unknown stage '$s' (expected mesh, solve or export)" >&2; exit 2 ;;
    esac
done
"""


def write_tiny_case(case_dir: str | os.PathLike, variant: str = "ok", n_iter: int = 30) -> Path:
    """Write the tiny case into ``case_dir`` (created); returns its path."""
    cd = Path(case_dir)
    for rel, text in _files(variant, n_iter).items():
        p = cd / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text)
    (cd / "run.sh").chmod(0o755)
    return cd


def write_tiny_sweep(root: str | os.PathLike, variants=("ok",), n_iter: int = 30) -> Path:
    """A sweep folder (manifest.json, cases.txt, cases/<id>/) with one tiny
    case per variant; case ids are ``tiny_<variant>``."""
    root = Path(root)
    records = []
    placement = place_body(np.array([0.30, 0.0, 0.05]), np.array([0.50, 0.0, 0.05]), 0.05, 0.05)
    ref = Reference(area=0.16 * 0.08, length=0.2, wheelbase=0.2, front_axle=(0.3, 0.0, 0.0),
                    rear_axle=(0.5, 0.0, 0.0), moment_point=(0.4, 0.0, 0.0), rho=1.0, nu=1e-3, speed=1.0)
    for v in variants:
        cid = f"tiny_{v}"
        write_tiny_case(root / "cases" / cid, v, n_iter)
        records.append(CaseRecord(
            case_id=cid, folder=f"cases/{cid}", variant=v, params={}, yaw_mode="crosswind",
            ground="stationary", mesh_frame="body", placement=placement,
            wind_direction_body=(1.0, 0.0, 0.0), reference=ref,
            patches={"body": ["body"], "wheels": [], "ground": "ground"}, fidelity="smoke",
            estimated_cells=2000,
        ))
    m = Manifest(cases=tuple(records), tool_version="test", config_file="(tiny test case)", config_hash="",
                 created_utc="", study="tiny test case")
    write_manifest(m, root)
    (root / "cases.txt").write_text("".join(f"{r.case_id}\n" for r in records))
    return root


def write_manifest_only(root: str | os.PathLike, case_ids, reference: Reference | None = None,
                        placement=None, wind_direction_body=(1.0, 0.0, 0.0)) -> Path:
    """manifest.json and cases.txt for cases ``cases/<id>`` (folders created
    empty), with the tiny case's placement and reference values unless
    others are given."""
    root = Path(root)
    if placement is None:
        placement = place_body(np.array([0.30, 0.0, 0.05]), np.array([0.50, 0.0, 0.05]), 0.05, 0.05)
    ref = reference or Reference(area=0.0128, length=0.2, wheelbase=0.2, front_axle=(0.3, 0.0, 0.0),
                                 rear_axle=(0.5, 0.0, 0.0), moment_point=(0.4, 0.0, 0.0), rho=1.0, nu=1e-3,
                                 speed=1.0)
    records = []
    for cid in case_ids:
        (root / "cases" / cid).mkdir(parents=True, exist_ok=True)
        records.append(CaseRecord(
            case_id=cid, folder=f"cases/{cid}", variant="v", params={}, yaw_mode="crosswind",
            ground="stationary", mesh_frame="body", placement=placement, wind_direction_body=tuple(wind_direction_body),
            reference=ref, patches={"body": ["body"], "wheels": [], "ground": "ground"}, fidelity="smoke"))
    write_manifest(Manifest(cases=tuple(records), tool_version="test", config_file="", config_hash="",
                            created_utc="", study="test"), root)
    (root / "cases.txt").write_text("".join(f"{c}\n" for c in case_ids))
    return root


if __name__ == "__main__":
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("folder")
    ap.add_argument("--variant", default="ok", choices=["ok", "collapsed", "crash"])
    ap.add_argument("--iterations", type=int, default=30)
    ap.add_argument("--run", action="store_true", help="run ./run.sh after writing")
    a = ap.parse_args()
    case = write_tiny_case(a.folder, a.variant, a.iterations)
    if a.run:
        sys.exit(subprocess.call([str(case / "run.sh")]))
