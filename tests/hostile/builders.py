"""Builders of small, valid sweep folders that the hostile inputs then spoil.

``finished_sweep`` makes a sweep that looks run to the end without the
solver: a manifest (tiny_case's placement and reference values), and per
case a VTK export of a closed demo surface (an icosphere, our own) carrying
pressure and wall shear, the export marker and an ``ok`` run record.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from _surfaces import icosphere
from _vtkfiles import polydata, write_solver_like_export
from tiny_case import write_manifest_only


def body_polydata(n_sub: int = 1):
    """A closed sphere of radius 0.05 m centred at (0.4, 0, 0.1) with a
    uniform kinematic pressure 1 m²/s² and no shear (DEMO data)."""
    X, F = icosphere(0.05, n_sub, center=(0.4, 0.0, 0.1))
    m = len(F)
    return polydata(X, F, {"p": np.ones(m), "wallShearStress": np.zeros((m, 3)), "yPlus": np.full(m, 40.0)})


def volume_vtu(path: Path) -> Path:
    """A small hexahedral volume (27 cells, zero velocity, DEMO data) as a
    compressed .vtu, as the converter writes ``internal.vtu``."""
    import pyvista as pv

    g = pv.ImageData(dimensions=(4, 4, 4), spacing=(0.1, 0.1, 0.1)).cast_to_unstructured_grid()
    g.cell_data["U"] = np.zeros((g.n_cells, 3), np.float32)
    g.cell_data["p"] = np.zeros(g.n_cells, np.float32)
    path.parent.mkdir(parents=True, exist_ok=True)
    import vtk

    w = vtk.vtkXMLUnstructuredGridWriter()  # appended, compressed: as the converter writes it
    w.SetInputData(g)
    w.SetFileName(str(path))
    w.Write()
    return path


def run_record(case_id: str, **over) -> dict:
    """An ``ok`` run record of the shape the runner writes."""
    rec = {"case_id": case_id, "folder": f"cases/{case_id}", "status": "ok", "message": "", "ranks": 1,
           "stages": [{"stage": s, "status": "ok", "wall_time": 1.0, "returncode": 0} for s in ("mesh", "solve", "export")],
           "wall_time": 3.0, "cells": 1000, "iterations": 100, "end_reason": "converged", "flags": []}
    rec.update(over)
    return rec


def finished_case(case_dir: Path, case_id: str, record: dict | None = None) -> Path:
    case_dir.mkdir(parents=True, exist_ok=True)
    write_solver_like_export(case_dir, {"body": body_polydata()}, time=100, name=case_id)
    (case_dir / "logs").mkdir(exist_ok=True)
    (case_dir / "logs" / "export.done").write_text("")
    (case_dir / "underfloor-run.json").write_text(json.dumps(record if record is not None else run_record(case_id)))
    return case_dir


def finished_sweep(root: Path, case_ids=("a", "b")) -> Path:
    root = write_manifest_only(root, list(case_ids))
    for cid in case_ids:
        finished_case(root / "cases" / cid, cid)
    return root


def edit_manifest(root: Path, edit) -> dict:
    """Apply ``edit(dict)`` to the sweep's manifest.json (the edit may return a
    replacement object) and write it back."""
    p = root / "manifest.json"
    d = json.loads(p.read_text())
    new = edit(d)
    d = d if new is None else new
    p.write_text(json.dumps(d) if not isinstance(d, str) else d)
    return d
