"""Build and run a tiny real solver case: a box-shaped body in a channel.

Used by the solver-marked tests (``tests/test_forces_solver.py``) and runnable
by hand::

    python tests/solver_case_tiny.py /tmp/tiny   # builds, runs, exports VTK

The domain is a 3×3×3 arrangement of hexahedral blocks with the middle block
left out: that hole is the body (patch ``body``). The flow is laminar
(ν = 0.02 m²/s, U = 1 m/s, box side 1 m, Re = 50), 40 SIMPLE iterations on
about 2 500 cells, 1 rank: a few seconds. The body sits off the channel
centre-line so that every force and moment component is non-zero.

The runtime ``forces`` monitor is switched on with a density ρ = 1.2 kg/m³
and a moment point away from the origin, with ``writePrecision 12`` so that
its ASCII output is not the limiting accuracy of the comparison.
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

RHO = 1.2                      # kg/m³, the monitor's rhoInf (our invented value)
CENTRE = (0.1, 0.2, 0.3)       # m, moment point of the monitor
NU = 0.02                      # m²/s
U_IN = 1.0                     # m/s
ITERATIONS = 40

# block edges (m): the body is the middle block x∈[0,1], y∈[-0.5,0.5], z∈[-0.5,0.5]
XS, YS, ZS = (-2.0, 0.0, 1.0, 4.0), (-2.0, -0.5, 0.5, 1.5), (-1.5, -0.5, 0.5, 2.0)
NX, NY, NZ = (6, 4, 8), (5, 4, 3), (3, 4, 5)   # cells per block along each axis

HEADER = """FoamFile
{{
    version     2.0;
    format      ascii;
    class       {cls};
    object      {obj};
}}
"""


def _write(case: Path, rel: str, cls: str, body: str) -> None:
    p = case / rel
    p.parent.mkdir(parents=True, exist_ok=True)
    p.write_text(HEADER.format(cls=cls, obj=p.name) + body)


def _block_mesh_dict() -> str:
    def vid(i, j, k):
        return i + 4 * (j + 4 * k)

    verts = [f"    ({XS[i]} {YS[j]} {ZS[k]})" for k in range(4) for j in range(4) for i in range(4)]
    blocks = []
    for k in range(3):
        for j in range(3):
            for i in range(3):
                if (i, j, k) == (1, 1, 1):
                    continue
                v = [vid(i, j, k), vid(i + 1, j, k), vid(i + 1, j + 1, k), vid(i, j + 1, k),
                     vid(i, j, k + 1), vid(i + 1, j, k + 1), vid(i + 1, j + 1, k + 1), vid(i, j + 1, k + 1)]
                blocks.append(f"    hex ({' '.join(map(str, v))}) ({NX[i]} {NY[j]} {NZ[k]}) simpleGrading (1 1 1)")

    def quad(a, b, c, d):
        return f"            ({a} {b} {c} {d})"

    inlet, outlet, sides, body = [], [], [], []
    for k in range(3):
        for j in range(3):
            inlet.append(quad(vid(0, j, k), vid(0, j, k + 1), vid(0, j + 1, k + 1), vid(0, j + 1, k)))
            outlet.append(quad(vid(3, j, k), vid(3, j + 1, k), vid(3, j + 1, k + 1), vid(3, j, k + 1)))
    for k in range(3):
        for i in range(3):
            sides.append(quad(vid(i, 0, k), vid(i + 1, 0, k), vid(i + 1, 0, k + 1), vid(i, 0, k + 1)))
            sides.append(quad(vid(i, 3, k), vid(i, 3, k + 1), vid(i + 1, 3, k + 1), vid(i + 1, 3, k)))
    for j in range(3):
        for i in range(3):
            sides.append(quad(vid(i, j, 0), vid(i, j + 1, 0), vid(i + 1, j + 1, 0), vid(i + 1, j, 0)))
            sides.append(quad(vid(i, j, 3), vid(i + 1, j, 3), vid(i + 1, j + 1, 3), vid(i, j + 1, 3)))
    # the six faces of the hole (orientation is fixed by blockMesh for boundary faces)
    b = [vid(1, 1, 1), vid(2, 1, 1), vid(2, 2, 1), vid(1, 2, 1), vid(1, 1, 2), vid(2, 1, 2), vid(2, 2, 2), vid(1, 2, 2)]
    for f in ((0, 3, 7, 4), (1, 5, 6, 2), (0, 4, 5, 1), (3, 2, 6, 7), (0, 1, 2, 3), (4, 7, 6, 5)):
        body.append(quad(*(b[n] for n in f)))

    def patch(name, typ, faces):
        return f"    {name}\n    {{\n        type {typ};\n        faces\n        (\n" + "\n".join(faces) + "\n        );\n    }\n"

    return ("convertToMeters 1;\nvertices\n(\n" + "\n".join(verts) + "\n);\nblocks\n(\n" + "\n".join(blocks)
            + "\n);\nedges ();\nboundary\n(\n" + patch("inlet", "patch", inlet) + patch("outlet", "patch", outlet)
            + patch("sides", "patch", sides) + patch("body", "wall", body) + ");\nmergePatchPairs ();\n")


def build(case: Path) -> None:
    """Write the case files into ``case`` (created)."""
    case.mkdir(parents=True, exist_ok=True)
    _write(case, "system/blockMeshDict", "dictionary", _block_mesh_dict())
    cx, cy, cz = CENTRE
    _write(case, "system/controlDict", "dictionary", f"""application simpleFoam;
startFrom startTime; startTime 0; stopAt endTime; endTime {ITERATIONS}; deltaT 1;
writeControl timeStep; writeInterval {ITERATIONS}; purgeWrite 0;
writeFormat ascii; writePrecision 12; writeCompression off; timeFormat general; timePrecision 6;
runTimeModifiable false;
functions
{{
    bodyForces
    {{
        type forces; libs ("libforces.so");
        writeControl timeStep; writeInterval 1;
        patches (body); rho rhoInf; rhoInf {RHO}; CofR ({cx} {cy} {cz}); pRef 0;
    }}
    bodyCoeffs
    {{
        type forceCoeffs; libs ("libforces.so");
        writeControl timeStep; writeInterval 1;
        patches (body); rho rhoInf; rhoInf {RHO}; CofR ({cx} {cy} {cz}); pRef 0;
        liftDir (0 0 1); dragDir (1 0 0); pitchAxis (0 1 0);
        magUInf {U_IN}; lRef 1; Aref 1;
    }}
    wallShear
    {{
        type wallShearStress; libs ("libfieldFunctionObjects.so");
        patches (body); writeControl writeTime;
    }}
}}
""")
    _write(case, "system/fvSchemes", "dictionary", """ddtSchemes { default steadyState; }
gradSchemes { default Gauss linear; }
divSchemes { default none; div(phi,U) bounded Gauss linearUpwind grad(U); div((nuEff*dev2(T(grad(U))))) Gauss linear; }
laplacianSchemes { default Gauss linear corrected; }
interpolationSchemes { default linear; }
snGradSchemes { default corrected; }
""")
    _write(case, "system/fvSolution", "dictionary", """solvers
{
    p { solver GAMG; smoother GaussSeidel; tolerance 1e-8; relTol 0.05; }
    U { solver smoothSolver; smoother symGaussSeidel; tolerance 1e-9; relTol 0.1; }
}
SIMPLE { nNonOrthogonalCorrectors 0; consistent yes; }
relaxationFactors { equations { U 0.9; } }
""")
    _write(case, "constant/transportProperties", "dictionary", f"transportModel Newtonian;\nnu {NU};\n")
    _write(case, "constant/turbulenceProperties", "dictionary", "simulationType laminar;\n")
    _write(case, "0/U", "volVectorField", f"""dimensions [0 1 -1 0 0 0 0];
internalField uniform ({U_IN} 0 0);
boundaryField
{{
    inlet {{ type fixedValue; value uniform ({U_IN} 0 0); }}
    outlet {{ type inletOutlet; inletValue uniform (0 0 0); value uniform ({U_IN} 0 0); }}
    sides {{ type slip; }}
    body {{ type noSlip; }}
}}
""")
    _write(case, "0/p", "volScalarField", """dimensions [0 2 -2 0 0 0 0];
internalField uniform 0;
boundaryField
{
    inlet { type zeroGradient; }
    outlet { type fixedValue; value uniform 0; }
    sides { type zeroGradient; }
    body { type zeroGradient; }
}
""")


def run(case: Path) -> None:
    """Mesh, solve and export the latest time to VTK; logs go to ``log.<app>``."""
    env = dict(os.environ)
    env.setdefault("WM_PROJECT_DIR", "/usr/share/openfoam")
    for app in (["blockMesh"], ["simpleFoam"], ["foamToVTK", "-latestTime"]):
        with open(case / f"log.{app[0]}", "w") as log:
            subprocess.run(app + ["-case", str(case)], stdout=log, stderr=subprocess.STDOUT, env=env, check=True)


if __name__ == "__main__":  # pragma: no cover
    target = Path(sys.argv[1] if len(sys.argv) > 1 else "tiny_case")
    build(target)
    run(target)
    print(target)
