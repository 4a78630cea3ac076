"""Frames and placement: the conventions of caseprep.contract.frames."""
from __future__ import annotations

import numpy as np
import pytest

from caseprep.contract import frames as fr


def test_positive_pitch_is_nose_up():
    # x is rearward: a positive rotation about +y must lower the tail (+x end).
    tail = fr.rot_y(np.radians(2.0)) @ np.array([1.0, 0.0, 0.0])
    assert tail[2] < 0


def test_positive_yaw_wind_moves_to_plus_y_in_body_axes():
    beta = np.radians(5.0)
    for mode in fr.YAW_MODES:
        P = fr.place_body([0, 0, 0.05], [2, 0, 0.05], 0.03, 0.03, beta, mode)
        w_body = P.vector_to_body(fr.wind_direction_ground(beta, mode))
        np.testing.assert_allclose(w_body, [np.cos(beta), np.sin(beta), 0.0], atol=1e-15)


def test_ground_motion_per_yaw_mode():
    beta = np.radians(10.0)
    # crosswind: the ground moves along the body's own x axis
    P = fr.place_body([0, 0, 0.05], [2, 0, 0.05], 0.03, 0.03, beta, "crosswind")
    g = P.vector_to_body(fr.ground_velocity_ground(30.0, beta, "crosswind"))
    np.testing.assert_allclose(g, [30.0, 0, 0], atol=1e-12)
    assert fr.air_speed(30.0, beta, "crosswind") == pytest.approx(30.0 / np.cos(beta))
    # yawed model: the ground moves with the air
    P = fr.place_body([0, 0, 0.05], [2, 0, 0.05], 0.03, 0.03, beta, "yawed-model")
    g = P.vector_to_body(fr.ground_velocity_ground(30.0, beta, "yawed-model"))
    w = P.vector_to_body(fr.wind_direction_ground(beta, "yawed-model"))
    np.testing.assert_allclose(g / 30.0, w, atol=1e-12)


@pytest.mark.parametrize("seed", range(20))
def test_reference_points_land_at_requested_heights(seed):
    rng = np.random.default_rng(seed)
    f = rng.normal(size=3)
    r = f + np.array([rng.uniform(0.5, 4.0), rng.normal() * 0.1, rng.normal() * 0.05])
    hf, hr = rng.uniform(0.005, 0.2, size=2)
    beta = rng.uniform(-0.3, 0.3)
    mode = fr.YAW_MODES[seed % 2]
    P = fr.place_body(f, r, hf, hr, beta, mode)
    np.testing.assert_allclose(P.height_above_ground(np.array([f, r])), [hf, hr], atol=1e-9)
    assert abs(P.pitch) < np.pi / 2
    # round trip and orthonormality
    pts = rng.normal(size=(10, 3))
    np.testing.assert_allclose(P.to_body(P.to_ground(pts)), pts, atol=1e-12)
    np.testing.assert_allclose(P.rotation @ P.rotation.T, np.eye(3), atol=1e-14)
    Q = fr.Placement.from_dict(P.to_dict())
    np.testing.assert_allclose(Q.rotation, P.rotation, atol=1e-15)


def test_rake_is_negative_pitch():
    # rear higher than front (positive rake) → nose down → negative pitch
    P = fr.place_body([0, 0, 0], [2, 0, 0], 0.02, 0.06)
    assert P.pitch == pytest.approx(-np.arcsin(0.04 / 2.0), abs=1e-15)


def test_impossible_ride_heights_refused():
    with pytest.raises(ValueError, match="difference"):
        fr.place_body([0, 0, 0], [0.1, 0, 0], 0.0, 1.0)


def test_wind_axes():
    R = fr.ground_to_wind_rotation(fr.wind_direction_ground(np.radians(30), "crosswind"))
    np.testing.assert_allclose(R @ R.T, np.eye(3), atol=1e-15)
    np.testing.assert_allclose(np.linalg.det(R), 1.0)
    np.testing.assert_allclose(R[2], [0, 0, 1])


def test_functions_do_not_modify_inputs():
    f = np.array([0.0, 0.0, 0.05]); r = np.array([2.0, 0.0, 0.05])
    f0, r0 = f.copy(), r.copy()
    P = fr.place_body(f, r, 0.02, 0.04)
    pts = np.random.default_rng(0).normal(size=(5, 3)); p0 = pts.copy()
    P.to_ground(pts); P.to_body(pts); P.vector_to_body(pts); P.height_above_ground(pts)
    w = np.array([1.0, 1.0, 0.3]); w0 = w.copy(); fr.ground_to_wind_rotation(w)
    np.testing.assert_array_equal(f, f0); np.testing.assert_array_equal(r, r0)
    np.testing.assert_array_equal(pts, p0); np.testing.assert_array_equal(w, w0)
