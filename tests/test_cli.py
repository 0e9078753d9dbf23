"""The command line: JSON contract, exit codes, one-line errors."""

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _run(*args, cwd=ROOT):
    return subprocess.run([sys.executable, "-m", "chiropt.cli", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=300)


def test_evaluate_json_contract(tmp_path):
    design = tmp_path / "d.yaml"
    design.write_text("lattice: {kind: hexagonal, period_nm: 380}\n"
                      "particles: [{radius_nm: 70, material: {n: 3.5}}]\n"
                      "illumination: {wavelength_nm: [600, 650, 700], polar_deg: 10}\n")
    res = _run("evaluate", str(design), "--json")
    assert res.returncode == 0, res.stderr
    data = json.loads(res.stdout)  # CONTRACT.md: one JSON object, nothing else on stdout
    assert data["wavelength_nm"] == [600.0, 650.0, 700.0]
    for q in ("R", "T", "A"):
        assert set(data[q]) == {"+1", "-1"}
        assert len(data[q]["+1"]) == 3
    # lossless particles: A = 0 within the energy-conservation accuracy (PHYSICS.md §2)
    assert max(abs(a) for a in data["A"]["+1"] + data["A"]["-1"]) < 1e-9


def test_evaluate_writes_plot(tmp_path):
    res = _run("evaluate", "configs/quickstart-design.yaml", "--out", str(tmp_path))
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "quickstart-design-spectrum.png").stat().st_size > 10_000
    assert "lambda (nm)" in res.stdout


def test_invalid_input_one_line_exit_2(tmp_path):
    design = tmp_path / "d.yaml"
    design.write_text("lattice: {kind: square, period_nm: 300}\n"
                      "particles: [{radius_nm: 200, material: Si}]\n"
                      "illumination: {wavelength_nm: 700}\n")
    res = _run("evaluate", str(design), "--json")
    assert res.returncode == 2
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "particles[0].radius_nm" in lines[0]
    assert "Traceback" not in res.stderr
    assert res.stdout == ""
