"""Design files: validation errors name the key path and the allowed range."""

import textwrap

import pytest

from chiropt.design import design_from_dict, load_design
from chiropt.errors import InputError

BASE = {
    "lattice": {"kind": "square", "period_nm": 400},
    "particles": [{"shape": "sphere", "radius_nm": 70, "material": {"n": 3.5, "k": 0.0}}],
    "illumination": {"wavelength_nm": {"start": 600, "stop": 800, "points": 5}},
}


def _with(path, value):
    import copy

    data = copy.deepcopy(BASE)
    node = data
    keys = path.split(".")
    for key in keys[:-1]:
        node = node[int(key)] if isinstance(node, list) else node[key]
    last = keys[-1]
    if isinstance(node, list):
        node[int(last)] = value
    else:
        node[last] = value
    return data


def test_valid_design_round_trips():
    d = design_from_dict(BASE)
    assert len(d.illumination.wavelength_nm) == 5
    assert design_from_dict(d.to_dict()) == d  # common practice, no source


@pytest.mark.parametrize("path,value,key,fragment", [
    ("particles.0.radius_nm", -5, "particles[0].radius_nm", "(0, 10000] nm"),
    ("particles.0.radius_nm", 0, "particles[0].radius_nm", "(0, 10000] nm"),
    ("particles.0.radius_nm", 250, "particles[0].radius_nm", "shortest lattice period"),
    ("lattice.kind", "triangular", "lattice.kind", "square, rectangular, hexagonal, oblique"),
    ("lattice.period_nm", "big", "lattice.period_nm", "expected a number"),
    ("illumination.polar_deg", 95, "illumination.polar_deg", "[0, 89] deg"),
    ("particles.0.material", "Unobtainium", "particles[0].material", "Closest short names"),
    ("illumination.wavelength_nm", {"start": 900, "stop": 600, "points": 3},
     "illumination.wavelength_nm.stop", "below start"),
])
def test_invalid_values_name_key_and_range(path, value, key, fragment):
    with pytest.raises(InputError) as err:
        d = design_from_dict(_with(path, value))
        # materials resolve lazily in the forward model
        from chiropt.response import evaluate
        evaluate(d)
    assert err.value.key == key
    assert fragment in str(err.value)


def test_unknown_key_suggests_closest():
    data = dict(BASE, illumnation={})
    with pytest.raises(InputError, match="did you mean 'illumination'"):
        design_from_dict(data)


def test_overlapping_particles_rejected():
    data = dict(BASE, particles=[
        {"radius_nm": 70, "material": "Si", "position_nm": [0, 0]},
        {"radius_nm": 70, "material": "Si", "position_nm": [100, 0]},
    ])
    with pytest.raises(InputError, match="overlaps particle 0") as err:
        design_from_dict(data)
    assert err.value.key == "particles[1].position_nm"


def test_error_carries_file_line(tmp_path):
    f = tmp_path / "d.yaml"
    f.write_text(textwrap.dedent("""\
        lattice: {kind: square, period_nm: 400}
        particles:
          - {shape: sphere, radius_nm: -3, material: Si}
        illumination: {wavelength_nm: 700}
        """))
    with pytest.raises(InputError, match=r"d.yaml:3"):
        load_design(f)


def test_malformed_yaml(tmp_path):
    f = tmp_path / "bad.yaml"
    f.write_text("lattice: {kind: square, period_nm: 400\nparticles: [\n")
    with pytest.raises(InputError, match="malformed YAML at line"):
        load_design(f)


def test_wavelength_outside_material_data_names_material():
    data = _with("particles.0.material", "Si")
    data["illumination"] = {"wavelength_nm": 3000}
    d = design_from_dict(data)
    from chiropt.response import evaluate
    with pytest.raises(InputError, match="3000") as err:
        evaluate(d)
    assert "Si" in str(err.value)


@pytest.mark.parametrize("particle,key,fragment", [
    ({"shape": "cylinder", "radius_nm": 60, "material": "Si"}, "particles[0].height_nm",
     "missing"),
    ({"shape": "cylinder", "radius_nm": 60, "height_nm": 20, "material": "Si"},
     "particles[0].height_nm", "allowed [0.25, 4]"),
    ({"shape": "sphere", "radius_nm": 60, "height_nm": 20, "material": "Si"},
     "particles[0].height_nm", "only for shape cylinder or spheroid"),
    ({"shape": "cube", "radius_nm": 60, "material": "Si"}, "particles[0].shape",
     "sphere, cylinder, spheroid"),
    ({"shape": "cylinder", "radius_nm": 150, "height_nm": 300, "material": "Si"},
     "particles[0].height_nm", "circumscribing sphere"),
])
def test_non_spherical_particle_errors(particle, key, fragment):
    with pytest.raises(InputError) as err:
        design_from_dict(dict(BASE, particles=[particle]))
    assert err.value.key == key
    assert fragment in str(err.value)


def test_cylinder_parameters_and_round_trip():
    d = design_from_dict(dict(BASE, particles=[{"shape": "cylinder", "radius_nm": 70,
                                                "height_nm": 90, "material": "Si"}]))
    assert d.parameters()["particles[0].height_nm"] == 90
    assert d.particles[0].half_height_nm == 45
    assert design_from_dict(d.to_dict()) == d
