"""DEMO — writes results.csv, an invented results table for the worked
example of `postproc analyse` (README). Not measured, not computed by CFD:
a made-up parametric floor model with made-up scatter, chosen to show the
analysis (a stall, a flagged point where a floor stalls, different
reference areas, a mesh study and the platform).

Run: python make_demo_table.py  (rewrites results.csv beside this file)
"""
from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

# variant → (peak front ride height m, peak −C_L, reference area m², yaw loss per deg)
VARIANTS = {
    "flat": (0.016, 1.05, 1.00, 0.010),
    "venturi_a": (0.021, 1.30, 1.00, 0.016),
    "venturi_b": (0.023, 1.31, 1.02, 0.020),
}
FRONTS = (0.015, 0.020, 0.025, 0.030, 0.035, 0.040)   # m
RAKES = (0.005, 0.015, 0.025)                           # m, h_r − h_f
SPEED = 40.0                                            # m/s
FINEST = 2


def downforce(v: str, hf: float, rake: float) -> float:
    """−C_L of the invented floor: x^a e^{a(1−x)}, x = h_f/h_peak (a = 2 below
    the peak, 1 above: a sharper loss when stalled), more with rake."""
    peak, top, _, _ = VARIANTS[v]
    x = hf / peak
    a = 2.0 if x < 1 else 1.0
    return top * x**a * math.exp(a * (1 - x)) * (1.0 + 4.0 * (rake - 0.015))


def row(v: str, hf: float, rake: float, yaw: float, level: int, rng, flags: str = "") -> dict:
    df = downforce(v, hf, rake) * (1.0 - VARIANTS[v][3] * abs(yaw))
    df *= 1.0 - 0.012 * (2.0 ** (FINEST - level) - 1.0)   # coarser meshes: less downforce, second order
    df += rng.normal(0.0, 0.004)
    bal = 0.44 + 3.0 * (rake - 0.015) - 1.5 * (hf - 0.025)
    cl = -df
    return {"case_id": f"{v}-{1000 * hf:.0f}-{1000 * rake:.0f}-y{yaw:g}-m{level}", "variant": v,
            "ride_height_front": f"{hf:.3f}", "ride_height_rear": f"{hf + rake:.3f}", "yaw_deg": f"{yaw:g}",
            "speed": f"{SPEED:g}", "mesh_level": level, "cl": f"{cl:.4f}", "cd": f"{0.26 + 0.07 * df:.4f}",
            "cs": f"{0.021 * yaw:.4f}", "cl_front": f"{cl * bal:.4f}", "cl_rear": f"{cl * (1 - bal):.4f}",
            "reference_area": f"{VARIANTS[v][2]:.2f}", "u_cl": "0.0030", "u_cd": "0.0008",
            "u_cl_front": "0.0020", "u_cl_rear": "0.0020", "flags": flags}


def rows() -> list[dict]:
    rng = np.random.default_rng(2024)
    out = []
    for v in VARIANTS:
        for hf in FRONTS:
            for rake in RAKES:
                stalled_run = v == "venturi_b" and hf == 0.015   # the steady runs failed where this floor stalls
                r = row(v, hf, rake, 0.0, FINEST, rng, "not-converged" if stalled_run else "")
                if stalled_run:
                    for k in ("cl", "cd", "cs", "cl_front", "cl_rear"):
                        r[k] = ""
                out.append(r)
        for hf in (0.020, 0.030, 0.040):
            out.append(row(v, hf, 0.015, 3.0, FINEST, rng))
        for level in (0, 1):
            out.append(row(v, 0.025, 0.015, 0.0, level, rng))
    return out


def main() -> None:
    path = Path(__file__).with_name("results.csv")
    data = rows()
    with open(path, "w", newline="", encoding="utf-8") as fh:
        fh.write("# DEMO — invented results table (make_demo_table.py), not measured or computed data\n")
        w = csv.DictWriter(fh, fieldnames=list(data[0]), lineterminator="\n")
        w.writeheader()
        w.writerows(data)
    print(f"wrote {path} ({len(data)} rows)")


if __name__ == "__main__":
    main()
