"""Hostile and mistaken input files, output places and the text the CLI prints.

Every hostile file goes through the real command line (``chiropt.cli.main``): exit code 2,
one line on stderr naming the limit or key, no traceback.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as onp
import pytest

from chiropt.cli import GRID_RANGE, main
from chiropt.design import design_from_dict, file_safe_name, load_design
from chiropt.yamlio import MAX_ITEMS, parse_yaml

ROOT = Path(__file__).resolve().parents[1]
CONFIGS = ROOT / "configs"


def _run(argv, capsys):
    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _one_line_refusal(argv, capsys, *fragments):
    code, _, err = _run(argv, capsys)
    assert code == 2, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    for frag in fragments:
        assert frag in lines[0], lines[0]
    return lines[0]


def _alias_bomb() -> str:
    rows = ['a0: &a0 ["x", "x", "x", "x", "x", "x", "x", "x", "x"]']
    for i in range(1, 10):
        rows.append(f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 9) + "]")
    return "\n".join(rows) + "\n"


HOSTILE = {
    # name: (bytes of the file, fragment of the one-line message)
    "binary": (bytes(range(256)) * 8, "binary file"),
    "latin-1": ("name: caf\xe9\n".encode("latin-1"), "not UTF-8"),
    "deep-list": (("a: " + "[" * 5000 + "]" * 5000 + "\n").encode(), "nesting depth"),
    "deep-map": (("a: " + "{b: " * 5000 + "1" + "}" * 5000 + "\n").encode(), "nesting depth"),
    "alias-bomb": (_alias_bomb().encode(), "expanded size"),
    "huge-list": (("a: [" + ",".join(["0"] * 5_000_000) + "]\n").encode(), "file size"),
    "long-list": (("a: [" + ",".join(["0"] * (MAX_ITEMS + 5)) + "]\n").encode(), "list length"),
    "python-tag": (b"name: !!python/name:os.system\n", "python/name"),
    "python-object": (b"name: !!python/object/apply:os.system [ls]\n", "not allowed"),
    "unknown-tag": (b"name: !foo bar\n", "'!foo' is not allowed"),
}


@pytest.mark.parametrize("kind", sorted(HOSTILE))
@pytest.mark.parametrize("command", ["evaluate", "run"])
def test_hostile_file_is_one_line_exit_2(tmp_path, capsys, kind, command):
    # common practice, no source: bounded parsing of untrusted files (YAML 1.2.2, sec. 3.2.2
    # on aliases; the billion-laughs expansion)
    data, fragment = HOSTILE[kind]
    path = tmp_path / f"{kind}.yaml"
    path.write_bytes(data)
    _one_line_refusal([command, path], capsys, fragment, str(path))


def test_goal_check_refuses_hostile_file(tmp_path, capsys):
    path = tmp_path / "g.yaml"
    path.write_bytes(HOSTILE["alias-bomb"][0])
    _one_line_refusal(["goal", "--check", path], capsys, "expanded size")


@pytest.mark.parametrize("text, expected", [
    ("1e-5", 1e-5), ("1e9", 1e9), ("-2E3", -2000.0), ("+3e+2", 300.0), ("1.0e-8", 1e-8),
    (".5e1", 5.0), ("2.5", 2.5), ("7", 7),
])
def test_exponent_numbers_are_floats(text, expected):
    # YAML 1.2.2 core schema, sec. 10.3.2: [-+]?(\.[0-9]+|[0-9]+(\.[0-9]*)?)([eE][-+]?[0-9]+)?
    value = parse_yaml(f"x: {text}\n")["x"]
    assert value == expected and type(value) is type(expected)


@pytest.mark.parametrize("text", ["e5", "1e", "abc", "1_0e5x"])
def test_non_numbers_stay_strings(text):
    # YAML 1.2.2 core schema, sec. 10.3.2 (these do not match the float pattern)
    assert isinstance(parse_yaml(f"x: {text}\n")["x"], str)


def test_exponent_in_design_file(tmp_path):
    # YAML 1.2.2 core schema, sec. 10.3.2
    path = tmp_path / "d.yaml"
    path.write_text("lattice: {kind: square, period_nm: 4.2e2}\n"
                    "particles: [{shape: sphere, radius_nm: 75, material: Si}]\n"
                    "illumination: {wavelength_nm: 7e2}\nmodel: {tolerance: 1e-9}\n")
    d = load_design(path)
    assert d.tolerance == pytest.approx(1e-9)
    assert d.illumination.wavelength_nm == (700.0,)


def _design(tmp_path, **over) -> Path:
    base = {"name": "t", "lattice": {"kind": "square", "period_nm": 420},
            "particles": [{"shape": "sphere", "radius_nm": 75, "material": "Si"}],
            "illumination": {"wavelength_nm": 700}}
    base.update(over)
    path = tmp_path / "d.yaml"
    path.write_text(json.dumps(base))  # JSON is YAML
    return path


def test_wavelength_outside_material_names_both_keys(tmp_path, capsys):
    # common practice, no source; Green 2008 silicon data end at 1450 nm
    path = _design(tmp_path, illumination={"wavelength_nm": 3000})
    _one_line_refusal(["evaluate", path], capsys, "illumination.wavelength_nm",
                      "particles[0].material")


def test_goal_wavelength_outside_material_names_at_nm(tmp_path, capsys):
    # common practice, no source
    text = (CONFIGS / "quickstart.yaml").read_text().replace("at_nm: 700", "at_nm: 5000")
    path = tmp_path / "g.yaml"
    path.write_text(text)
    _one_line_refusal(["goal", "--check", path], capsys, "objectives[0].at_nm", "material")


def test_small_period_names_period(tmp_path, capsys):
    # common practice, no source
    path = _design(tmp_path, lattice={"kind": "square", "period_nm": 100})
    _one_line_refusal(["evaluate", path], capsys, "particles[0].radius_nm", "lattice.period_nm")


@pytest.mark.parametrize("argv, fragment", [
    (["evaluate", CONFIGS / "quickstart.yaml"], "this is a goal file"),
    (["inspect", CONFIGS / "quickstart.yaml", "--at-nm", "700"], "this is a goal file"),
    (["goal", "--check", CONFIGS / "quickstart-design.yaml"], "this is a design file"),
    (["run", CONFIGS / "near-field-design.yaml"], "this is a design file"),
])
def test_goal_and_design_files_recognised(capsys, argv, fragment):
    # common practice, no source
    _one_line_refusal(argv, capsys, fragment)


@pytest.mark.parametrize("extra, option", [
    (["--fields", "/nonexistent/x.npz"], "--fields"),
    (["--out", "/proc/x"], "--out"),
])
def test_unwritable_evaluate_outputs(capsys, extra, option):
    # common practice, no source
    line = _one_line_refusal(["evaluate", CONFIGS / "near-field-design.yaml", *extra], capsys,
                             option)
    assert extra[1] in line


@pytest.mark.parametrize("option, path", [("--gds", "/nonexistent/x.gds"),
                                          ("--setup", "/nonexistent/x.json")])
def test_unwritable_export_outputs(capsys, option, path):
    # common practice, no source
    _one_line_refusal(["export", CONFIGS / "quickstart-design.yaml", option, path], capsys,
                      option, path)


def test_unwritable_inspect_output(capsys):
    # common practice, no source
    _one_line_refusal(["inspect", CONFIGS / "near-field-design.yaml", "--at-nm", "700",
                       "--out", "/proc/x"], capsys, "--out", "/proc/x")


@pytest.mark.parametrize("command", [["evaluate"], ["inspect", "--at-nm", "700"]])
@pytest.mark.parametrize("grid", [1, 5000])
def test_grid_range_same_for_evaluate_and_inspect(tmp_path, capsys, command, grid):
    # common practice, no source
    extra = ["--fields", tmp_path / "f.npz"] if command == ["evaluate"] else []
    _one_line_refusal([command[0], CONFIGS / "near-field-design.yaml", *command[1:], *extra,
                       "--grid", grid], capsys, "--grid", f"[{GRID_RANGE[0]}, {GRID_RANGE[1]}]")


@pytest.mark.parametrize("label, expected", [
    ("café", "cafe"), ("../x", "x"), ("a/b c", "a_b_c"), ("..", "design"), ("日本", "design"),
    ("quickstart-Si", "quickstart-Si"),
])
def test_file_safe_name(label, expected):
    # common practice, no source: portable file names (POSIX portable filename character set)
    assert file_safe_name(label) == expected


def test_changed_run_name_is_noted(tmp_path, capsys):
    # common practice, no source
    text = (CONFIGS / "quickstart.yaml").read_text().replace("name: quickstart", "name: ../évil")
    path = tmp_path / "g.yaml"
    path.write_text(text)
    from chiropt.goals import load_goal

    goals = load_goal(path)
    assert all("/" not in g.run_name and not g.run_name.startswith(".") for g in goals)
    assert all("note: run folder named" in g.name_note for g in goals)


# ------------------------------------------------------------------ shipped examples

def _readme_design(uncomment: bool) -> dict:
    text = (ROOT / "README.md").read_text()
    block = text.split("```yaml\n", 1)[1].split("```", 1)[0]
    if uncomment:
        block = re.sub(r"^  # (- \{shape: (cylinder|spheroid).*)$", r"  \1", block, flags=re.M)
        block = re.sub(r"^  #(    position_nm.*)$", r"  \1", block, flags=re.M)
    return parse_yaml(block)


def _shipped(name: str):
    if name.startswith("README"):
        return design_from_dict(_readme_design(name.endswith("solids")), base_dir=ROOT)
    if name.startswith("quickstart.yaml"):
        from chiropt.goals import load_goal

        return {g.material: g.design for g in load_goal(CONFIGS / "quickstart.yaml")}[
            name.split(":")[1]]
    return load_design(CONFIGS / name)


@pytest.mark.parametrize("name, wavelengths", [
    ("quickstart-design.yaml", [560.0, 650.0, 760.0, 890.0]),
    ("near-field-design.yaml", [560.0, 650.0, 760.0, 890.0]),
    ("README", [560.0, 650.0, 760.0, 890.0]),
    ("README-with-solids", [600.0, 800.0]),
    ("quickstart.yaml:Si", [700.0]),
    ("quickstart.yaml:Ag", [700.0]),
])
def test_shipped_examples_valid_at_their_model(name, wavelengths):
    # common practice, no source: one more multipole order changes no reported quantity by
    # more than the tool's own validity tolerance
    from chiropt.model import validity
    from chiropt.response import VALIDITY_TOLERANCE

    design = _shipped(name).with_wavelengths(wavelengths)
    check = validity(design)
    assert check["worst"] < VALIDITY_TOLERANCE, check["change"]


def test_readme_solids_line_is_a_valid_design():
    # common practice, no source: the commented cylinder/spheroid lines work when uncommented
    data = _readme_design(uncomment=True)
    shapes = [p["shape"] for p in data["particles"]]
    assert "cylinder" in shapes and "spheroid" in shapes
    design_from_dict(data, base_dir=ROOT)


# ------------------------------------------------------------------ what the user reads

@pytest.fixture(scope="module")
def text_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("text")
    path = folder / "nf.yaml"
    path.write_text("name: nf\nlattice: {kind: square, period_nm: 420}\n"
                    "particles: [{shape: sphere, radius_nm: 60, material: Si}]\n"
                    "region: {kind: plane, height_nm: 10}\n"
                    "illumination: {wavelength_nm: {start: 600, stop: 800, points: 40}}\n")
    return path, folder


def test_text_validity_orders_and_subset(text_report, capsys):
    # common practice, no source
    path, folder = text_report
    code, out, err = _run(["evaluate", path, "--validity", "--at-nm", "700", "--out", folder],
                          capsys)
    assert code == 0, err
    assert "DOCP(+1)" in out and "DOCP(-1)" in out
    assert re.search(r"\b\d+ of 40 wavelengths shown; --json for all", out)
    assert "validity: change of each quantity" in out
    for q in ("R+1", "T-1", "u", "g", "docp+1", "docp-1"):
        assert re.search(rf"^\s+{re.escape(q)}\s", out, flags=re.M), q
    assert "diffraction orders at 700 nm" in out
    assert re.search(r"^\s+\(0,0\)\s+propagating", out, flags=re.M)


def test_json_has_particle_absorption_conserving_energy(tmp_path, capsys):
    # energy conservation: without substrate or films the particles absorb all that is
    # absorbed, so A_particles = A = 1 - R - T (Bohren & Huffman 1983, sec. 3.4)
    path = _design(tmp_path, particles=[{"shape": "sphere", "radius_nm": 60,
                                         "material": {"n": 3.5, "k": 0.2}}],
                   illumination={"wavelength_nm": [600, 700, 800]})
    code, out, err = _run(["evaluate", path, "--json"], capsys)
    assert code == 0, err
    data = json.loads(out)
    for h in ("+1", "-1"):
        a_p = onp.asarray(data["A_particles"][h], float)
        assert onp.all(a_p > 1e-3)
        assert onp.allclose(a_p, data["A"][h], rtol=1e-6, atol=1e-9)


def test_explain_is_user_text_only(capsys):
    # common practice, no source
    code, out, _ = _run(["goal", "--explain"], capsys)
    assert code == 0
    assert out.startswith("Goal file reference")
    assert "Owns:" not in out and "Must not import" not in out


def test_materials_has_header(capsys):
    # common practice, no source
    code, out, _ = _run(["materials"], capsys)
    assert code == 0
    assert out.splitlines()[0].split()[:3] == ["name", "database", "entry"]


@pytest.mark.parametrize("n, text", [(0, "0 designs"), (1, "1 design"), (2, "2 designs")])
def test_plural(n, text):
    # common practice, no source (English plural)
    from chiropt.cli import _count

    assert _count(n, "design") == text


def test_inspect_names_and_warnings(tmp_path, capsys):
    # common practice, no source: no doubled words in file names
    design = tmp_path / "d.yaml"
    design.write_text((CONFIGS / "near-field-design.yaml").read_text()
                      .replace("name: si-on-silica-near-field", "name: a/near-field")
                      .replace("points: 71", "points: 3"))
    code, out, err = _run(["inspect", design, "--at-nm", "700", "--out", tmp_path / "o",
                           "--grid", 8], capsys)
    assert code == 0, err
    names = [Path(p).name for p in out.split()]
    assert "a_near-field-spectra.png" in names
    assert not any("near-field-near-field" in n for n in names)
    assert all((tmp_path / "o" / n).exists() for n in names)
    assert "file names use 'a_near-field'" in err
