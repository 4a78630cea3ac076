"""Sweep expansion, ride-height definition and stable case ids (caseprep.planning.points)."""
from __future__ import annotations

import re

import numpy as np
import pytest

from caseprep.contract import frames as fr
from caseprep.config.load import load_config
from caseprep.contract.errors import UserError
from caseprep.planning.points import expand, heights_from_pitch, pitch_from_heights
from planning_helpers import BASE_TOML, write_config


def _cfg(tmp_path, sweep_block: str, extra: str = ""):
    text = BASE_TOML.split("[sweep]")[0] + extra + "[sweep]\n" + sweep_block + "\n[mesh]\nfidelity = \"smoke\"\n"
    return load_config(write_config(tmp_path, text))


def test_factorial_count_and_order(tmp_path):
    c = _cfg(tmp_path, "ride_height = [0.03, 0.05]\npitch_deg = [0.0, -0.5, -1.0]\nyaw_deg = [0.0, 3.0]\n"
                       "speed = [30.0, 50.0]\nmesh_level = [0, 1]")
    pts = expand(c)
    assert len(pts) == 2 * 3 * 2 * 2 * 2
    assert len({p.case_id for p in pts}) == len(pts)
    assert all(re.fullmatch(r"base-[0-9a-f]{8}", p.case_id) for p in pts)
    assert pts[0].params() == {"ride_height_front": pytest.approx(0.03), "ride_height_rear": pytest.approx(0.03),
                               "pitch_deg": 0.0, "yaw_deg": 0.0, "speed": 30.0, "mesh_level": 0}


def test_ids_stable_when_axis_value_added(tmp_path):
    a = expand(_cfg(tmp_path, "ride_height = [0.03, 0.05]\npitch_deg = [0.0, -0.5]\nyaw_deg = [0.0]"))
    b = expand(_cfg(tmp_path, "ride_height = [0.03, 0.04, 0.05]\npitch_deg = [0.0, -0.5, -1.0]\nyaw_deg = [0.0, 2.0]"))
    ids_a = {p.case_id for p in a}
    ids_b = {p.case_id for p in b}
    assert ids_a <= ids_b and len(ids_b) == 18


def test_pairs_mode_and_same_point_same_id(tmp_path):
    pitch = expand(_cfg(tmp_path, "ride_height = [0.03]\npitch_deg = [-0.5]"))[0]
    pairs = expand(_cfg(tmp_path, f"ride_heights_front_rear = [[{pitch.ride_height_front!r}, {pitch.ride_height_rear!r}]]"))[0]
    assert pairs.case_id == pitch.case_id
    assert pairs.pitch_deg == pytest.approx(-0.5, abs=1e-9)


def test_points_mode(tmp_path):
    c = _cfg(tmp_path, "[[sweep.points]]\nride_height = 0.04\npitch_deg = -0.3\n\n"
                       "[[sweep.points]]\nvariant = \"base\"\nride_height_front = 0.03\nride_height_rear = 0.05\nyaw_deg = 2.0\nspeed = 44.0")
    pts = expand(c)
    assert len(pts) == 2
    assert pts[1].speed == 44.0 and pts[1].yaw_deg == 2.0 and pts[0].speed == 30.0
    assert pts[1].pitch_deg < 0  # rear higher = nose down = negative pitch


def test_duplicate_points_refused(tmp_path):
    c = _cfg(tmp_path, "ride_height = [0.03, 0.03]")
    with pytest.raises(UserError, match="each operating point once"):
        expand(c)


def test_pitch_too_large_for_height_refused(tmp_path):
    # pivot at the front point: 0.8 m to the rear point; 5 deg nose-up lowers it by 0.8 sin 5° = 70 mm
    c = _cfg(tmp_path, "ride_height = [0.03]\npitch_deg = [5.0]")
    with pytest.raises(UserError, match="both reference points above the ground"):
        expand(c)


@pytest.mark.parametrize("seed", range(10))
def test_heights_from_pitch_round_trip(seed):
    rng = np.random.default_rng(seed)
    f = np.array([rng.uniform(0.0, 0.5), rng.normal() * 0.05, rng.normal() * 0.02])
    r = f + np.array([rng.uniform(0.5, 3.0), rng.normal() * 0.05, rng.normal() * 0.02])
    pivot = f + np.array([rng.uniform(-0.3, 3.0), 0.0, rng.normal() * 0.02])
    h = rng.uniform(0.02, 0.1)
    th = rng.uniform(-2.0, 2.0)
    hf, hr = heights_from_pitch(h, th, f, r, pivot)
    P = fr.place_body(f, r, hf, hr)
    # exact trigonometry both ways: the pivot lands at h and θ is recovered to round-off
    assert np.degrees(P.pitch) == pytest.approx(th, abs=1e-9)
    assert P.height_above_ground(pivot) == pytest.approx(h, abs=1e-9)
    assert pitch_from_heights(hf, hr, f, r) == pytest.approx(th, abs=1e-9)


def test_far_field_sweep(tmp_path):
    text = BASE_TOML.replace("[body]", '[ground]\nmode = "none"\n\n[body]').split("[sweep]")[0]
    text += "[sweep]\npitch_deg = [0.0, 5.0]\nyaw_deg = [0.0, 10.0]\n"
    c = load_config(write_config(tmp_path, text))
    pts = expand(c)
    assert len(pts) == 4 and all(p.ride_height_front is None for p in pts)
    assert len({p.case_id for p in pts}) == 4  # without a ground the pitch is part of the id
