"""Mesher settings that depend on prism layers: layered meshes get the
layer-phase settings, meshes without layers keep the defaults unchanged."""
from __future__ import annotations

import pytest

from caseprep.casefiles import foamdict as fd
from caseprep.casefiles import render
from uf_specs import make_spec


def _shm(spec):
    files = render.render_case(spec)
    return fd.parse(files["system/snappyHexMeshDict"].text, source="system/snappyHexMeshDict")


def test_layered_mesh_gets_layer_phase_settings():
    sh = _shm(make_spec("lay", layers=True))
    assert sh["addLayers"] == "true"
    al, q = sh["addLayersControls"], sh["meshQualityControls"]
    # values chosen from measured runs of the demo floor (README presets paragraph)
    assert al["featureAngle"] == pytest.approx(180.0)
    assert q["minFaceWeight"] == pytest.approx(0.02)


def test_mesh_without_layers_keeps_defaults():
    sh = _shm(make_spec("nolay", layers=False))
    assert sh["addLayers"] == "false"
    al, q = sh["addLayersControls"], sh["meshQualityControls"]
    assert al["featureAngle"] == pytest.approx(120.0)
    assert q["minFaceWeight"] == pytest.approx(0.05)
