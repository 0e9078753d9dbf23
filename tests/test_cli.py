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
    data = json.loads(res.stdout)  # docs/cli.md: one JSON object, nothing else on stdout
    assert data["wavelength_nm"] == [600.0, 650.0, 700.0]
    for q in ("R", "T", "A"):
        assert set(data[q]) == {"+1", "-1"}
        assert len(data[q]["+1"]) == 3
    # lossless particles: A = 0 within the energy-conservation accuracy (docs/theory.md §8)
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


def test_evaluate_grad_contract(tmp_path):
    # docs/cli.md "--grad": "grad": {QUANTITY: {PATH: [...]}}, one value per wavelength;
    # checked against a central finite difference of the JSON spectra (common practice).
    text = ("lattice: {kind: square, period_nm: %s}\n"
            "particles: [{radius_nm: 70, material: Si}]\n"
            "substrate: {material: SiO2}\n"
            "illumination: {wavelength_nm: [650, 700]}\n")
    design = tmp_path / "d.yaml"
    design.write_text(text % 400)
    res = _run("evaluate", str(design), "--json", "--grad", "lattice.period_nm")
    assert res.returncode == 0, res.stderr
    grad = json.loads(res.stdout)["grad"]
    assert set(grad) == {"R+1", "R-1", "T+1", "T-1", "A+1", "A-1"}
    vals = []
    for period in (399.99, 400.01):
        design.write_text(text % period)
        vals.append(json.loads(_run("evaluate", str(design), "--json").stdout)["R"]["+1"])
    fd = [(b - a) / 0.02 for a, b in zip(*vals, strict=True)]
    for a, b in zip(grad["R+1"]["lattice.period_nm"], fd, strict=True):
        assert abs(a - b) < 1e-6 * max(1.0, abs(b)) + 1e-9


def test_evaluate_grad_unknown_path(tmp_path):
    res = _run("evaluate", "configs/quickstart-design.yaml", "--json", "--grad", "radius")
    assert res.returncode == 2
    assert "particles[0].radius_nm" in res.stderr


def test_evaluate_metrics_orders_fields_contract(tmp_path):
    # docs/cli.md: "metrics" per wavelength, "orders" at --at-nm, npz layout of --fields.
    import numpy as np

    design = tmp_path / "d.yaml"
    design.write_text("lattice: {kind: square, period_nm: 400}\n"
                      "particles: [{radius_nm: 70, material: Si}]\n"
                      "substrate: {material: SiO2}\n"
                      "region: {kind: slab, from_nm: 5, thickness_nm: 20}\n"
                      "illumination: {wavelength_nm: [620, 700]}\n")
    npz = tmp_path / "f.npz"
    res = _run("evaluate", str(design), "--json", "--at-nm", "655", "--fields", str(npz),
               "--grid", "8")
    assert res.returncode == 0, res.stderr
    data = json.loads(res.stdout)
    m = data["metrics"]
    for key in ("u", "c", "g", "background"):
        assert len(m[key]) == 2
    for key in ("s0", "docp"):
        assert set(m[key]) == {"+1", "-1"}
    # g = c/u by definition (docs/theory.md §12)
    assert all(abs(g - c / u) < 1e-12 for g, c, u in zip(m["g"], m["c"], m["u"], strict=True))
    rows = data["orders"]
    assert rows[0]["m"] == 0 and rows[0]["n"] == 0 and rows[0]["bound"] is None
    assert abs(sum(r["share"] for r in rows) - 1.0) < 1e-6
    for r in rows[1:]:
        assert {"m", "n", "K", "evanescent", "share", "g", "docp", "bound"} <= set(r)
        if r["evanescent"]:  # docs/theory.md §14 bound
            assert abs(r["g"]) <= r["bound"] + 1e-12
    f = np.load(npz)
    assert f["E"].shape == (2, 2, 8, 8, 3) and f["H"].shape == (2, 2, 8, 8, 3)
    assert f["x_nm"].shape == (8, 8)


def test_inspect_writes_figures(tmp_path):
    res = _run("inspect", "configs/near-field-design.yaml", "--at-nm", "650", "--out",
               str(tmp_path), "--grid", "24")
    assert res.returncode == 0, res.stderr
    pngs = sorted(tmp_path.glob("*.png"))
    assert len(pngs) == 4 and all(p.stat().st_size > 20_000 for p in pngs)


def test_inspect_needs_region():
    res = _run("inspect", "configs/quickstart-design.yaml", "--at-nm", "650")
    assert res.returncode == 2 and "region" in res.stderr
