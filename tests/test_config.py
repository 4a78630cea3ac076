"""Config loading and validation messages (caseprep.config.schema)."""
from __future__ import annotations

from pathlib import Path

import pytest

from caseprep.config.load import load_config
from caseprep.contract.errors import UserError, UserErrors
from planning_helpers import BASE_TOML, write_config

EXAMPLES = Path(__file__).resolve().parent.parent / "example_cases"


def _err(tmp_path, text, geometry=True) -> str:
    p = write_config(tmp_path, text, geometry)
    with pytest.raises(UserError) as ei:
        load_config(p)
    msg = str(ei.value)
    # never pydantic's raw dump
    assert "validation error" not in msg.lower() and "input should" not in msg.lower()
    assert "https://errors.pydantic.dev" not in msg
    return msg


def test_examples_load():
    c = load_config(EXAMPLES / "floor_study" / "sweep.toml")
    assert c.study.name == "demo-floor-study"
    assert c.variant_names == ("flat", "diffuser8", "diffuser14")
    assert Path(c.variants["flat"].geometry).is_absolute()
    assert c.mesh.fidelity == "smoke" and c.sweep.yaw_mode == "crosswind"
    s = load_config(EXAMPLES / "sphere_re100" / "sweep.toml")
    assert s.ground.mode == "none" and s.solver.turbulence_model == "laminar"


def test_config_is_frozen(tmp_path):
    c = load_config(write_config(tmp_path))
    with pytest.raises(Exception):
        c.air.speed = 3.0  # type: ignore[misc]


def test_unknown_key_did_you_mean(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("speed = 30.0", "sped = 30.0"))
    assert "sweep.toml" in msg and "air.sped" in msg and "Did you mean 'speed'" in msg
    assert "Fix:" in msg


def test_unknown_key_in_variant(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace('geometry = "car.stl"', 'geometry = "car.stl"\ngeomtry = "x"'))
    assert "variants.base.geomtry" in msg and "Did you mean 'geometry'" in msg


def test_wrong_type(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("speed = 30.0", 'speed = "fast"'))
    assert "expected a number (m/s), got 'fast'" in msg and "air.speed" in msg


def test_wrong_vector_length(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("front_axle = [0.2, 0.0, 0.05]", "front_axle = [0.2, 0.0]"))
    assert "body.front_axle" in msg and "3" in msg


def test_negative_ride_height(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.05, -0.01]"))
    assert "expected a positive number (m) up to 10000, got -0.01" in msg
    assert "sweep.ride_height[1]" in msg and "measured upwards from the ground" in msg


def test_missing_geometry_file(tmp_path):
    msg = _err(tmp_path, BASE_TOML, geometry=False)
    assert "existing geometry file" in msg and "car.stl" in msg and "variants.base.geometry" in msg


def test_yaw_mode_typo(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace('[sweep]', '[sweep]\nyaw_mode = "crosswnd"'))
    assert "sweep.yaw_mode" in msg and "Did you mean 'crosswind'" in msg


@pytest.mark.parametrize("name", ["../escape", "a b", "x;rm", "9lives", "dot.ted", "quo'te"])
def test_variant_names_that_break_things_are_refused(tmp_path, name):
    text = BASE_TOML.replace("[variants.base]", f'[variants."{name}"]')
    msg = _err(tmp_path, text)
    assert "letters, digits" in msg and f"variants.{name}" in msg


def test_reference_area_word(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("reference_length = 0.6", 'reference_length = 0.6\nreference_area = "automatic"'))
    assert 'or "auto"' in msg and "body.reference_area" in msg
    msg = _err(tmp_path, BASE_TOML.replace("reference_length = 0.6", "reference_length = 0.6\nreference_area = true"))
    assert "body.reference_area" in msg


def test_missing_required_section(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("[air]\nspeed = 30.0\n", ""))
    assert "expected the key air" in msg


def test_toml_syntax_error(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("speed = 30.0", "speed = = 30"))
    assert "not valid TOML" in msg and "line" in msg


def test_several_problems_reported_at_once(tmp_path):
    text = (BASE_TOML.replace("speed = 30.0", "speed = -3.0")
            .replace('[sweep]', '[sweep]\nyaw_mode = "yawed"')
            .replace("[mesh]", "[mesh]\nfidelty = 'smoke'"))
    p = write_config(tmp_path, text)
    with pytest.raises(UserErrors) as ei:
        load_config(p)
    keys = [e.key for e in ei.value.errors]
    assert "sweep.yaw_mode" in keys and "mesh.fidelty" in keys
    # the type/shape stage stops before the value stage: fix those first, then the rest shows
    p.write_text(BASE_TOML.replace("speed = 30.0", "speed = -3.0").replace("ride_height = [0.05]", "ride_height = [0.0]"))
    with pytest.raises(UserErrors) as ei:
        load_config(p)
    assert {e.key for e in ei.value.errors} == {"air.speed", "sweep.ride_height[0]"}


def test_mixing_sweep_modes_refused(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.05]\nride_heights_front_rear = [[0.03, 0.05]]"))
    assert "either sweep.ride_height" in msg


def test_far_field_refuses_ride_height(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("[body]", '[ground]\nmode = "none"\n\n[body]'))
    assert "no ride heights without a ground" in msg


def test_wheel_needs_geometry_or_solid(tmp_path):
    text = BASE_TOML.replace("[variants.base]", "[[body.wheels]]\nname = \"fl\"\ncentre = [0.2, -0.2, 0.1]\nradius = 0.1\n\n[variants.base]")
    msg = _err(tmp_path, text)
    assert "exactly one of geometry" in msg and "body.wheels[0]" in msg


def test_unknown_sweep_variant(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("[sweep]", '[sweep]\nvariants = ["bsae"]'))
    assert "sweep.variants[0]" in msg and "Did you mean 'base'" in msg


def test_too_many_values(tmp_path):
    msg = _err(tmp_path, BASE_TOML.replace("front_axle = [0.2, 0.0, 0.05]", "front_axle = [0.2, 0.0, 0.05, 1.0]"))
    assert "a list of 3 values" in msg and "body.front_axle" in msg
    msg = _err(tmp_path, BASE_TOML.replace("ride_height = [0.05]\npitch_deg = [0.0]", "ride_heights_front_rear = [[0.03]]"))
    assert "a list of 2 values" in msg and "sweep.ride_heights_front_rear[0]" in msg


def test_readme_key_table_is_rendered_from_the_one_declaration():
    # the README's table of config keys comes from caseprep.config.keys (regenerate with
    # `python -c "from caseprep.config.keys import markdown_table; print(markdown_table())"`)
    from pathlib import Path

    from caseprep.config.keys import markdown_table

    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    assert markdown_table() in readme


def test_every_model_field_is_a_declared_key_and_back():
    import types
    import typing

    from caseprep.config import schema
    from caseprep.config.keys import KEYS, NO_DEFAULT

    found = {}

    def model_of(ann):
        return ann if isinstance(ann, type) and not typing.get_args(ann) and issubclass(ann, schema.BaseModel) else None

    def walk(model, prefix):
        for name, f in model.model_fields.items():
            ann = f.annotation
            opts = [a for a in typing.get_args(ann) if a is not type(None)]
            if typing.get_origin(ann) in (typing.Union, types.UnionType) and len(opts) == 1:
                ann = opts[0]  # Optional[X] → X
            args = typing.get_args(ann)
            if typing.get_origin(ann) is tuple and args and model_of(args[0]):
                walk(args[0], f"{prefix}{name}[].")
            elif typing.get_origin(ann) is dict and model_of(args[1]):
                walk(args[1], f"{prefix}{name}.<name>.")
            elif model_of(ann):
                walk(ann, f"{prefix}{name}.")
            else:
                found[prefix + name] = f
    walk(schema.Config, "")
    inner_lists = {"sweep.points"}  # a list of tables with a row of its own
    assert set(found) | inner_lists == set(KEYS)
    for key, f in found.items():  # a default in a model is the declared one
        if not f.is_required() and f.default is not None:
            assert KEYS[key].value is not NO_DEFAULT and f.default == KEYS[key].value, key


def test_report_section_baseline_and_picture_point(tmp_path):
    c = load_config(write_config(tmp_path, BASE_TOML + '\n[report]\nbaseline = "base"\npicture_ride_height = 0.05\n'))
    assert c.report.baseline == "base" and c.report.picture_ride_height == 0.05 and c.report.picture_yaw_deg is None
    msg = _err(tmp_path, BASE_TOML + '\n[report]\nbaseline = "bsae"\npicture_ride_height = -0.02\n')
    assert "report.baseline" in msg and "Did you mean 'base'" in msg and "name one of: base" in msg
    assert "report.picture_ride_height" in msg
    msg = _err(tmp_path, BASE_TOML + '\n[report]\nbaselin = "base"\n')
    assert "report.baselin" in msg and "Did you mean 'baseline'" in msg
