"""Run reports: the comparison figures on fronts built here, and reports of small real runs.

The browser checks of the HTML page are in test_report_browser.py; the runs they read are
made by the ``report_runs`` fixture of tests/conftest.py.
"""

from __future__ import annotations

import csv
import itertools

import numpy as onp
import pytest

from chiropt.cli import main
from chiropt.errors import InputError
from chiropt.report.compare import (common_reference, compare_fronts, coverage,
                                    dominance_stretches, same_objectives)
from chiropt.report.details import decode_map, encode_map


def grid_area(fronts, senses, ref) -> int:
    """Area dominated by integer points, counted cell by cell (the definition of the
    hypervolume indicator: the measure of the dominated region; Zitzler & Thiele 1999)."""
    sign = onp.array([-1 if s == "max" else 1 for s in senses])
    Z = onp.vstack(fronts) * sign
    r = onp.asarray(ref) * sign
    lo = Z.min(axis=0)
    count = 0
    for cx, cy in itertools.product(range(int(lo[0]), int(r[0])),
                                    range(int(lo[1]), int(r[1]))):
        # the unit cell [cx, cx+1] x [cy, cy+1] is dominated when its lower corner is
        if onp.any((Z[:, 0] <= cx) & (Z[:, 1] <= cy)):
            count += 1
    return count


def staircase(n, top, senses=("max", "max")):
    """n integer points on the line x + y = top (a front for maximizing both)."""
    P = onp.array([[k, top - k] for k in range(1, n + 1)], float)
    if senses[1] == "min":
        P[:, 1] = -P[:, 1]
    return P


@pytest.mark.parametrize("senses", [("max", "max"), ("max", "min")])
def test_hypervolume_at_a_common_reference_matches_a_cell_count(senses):
    a = staircase(6, 10, senses)
    b = a + onp.array([2.0, 3.0 if senses[1] == "max" else -3.0])  # b lies beyond a
    ref = [0.0, 0.0]
    cmp = compare_fronts(["a", "b"], [a, b], [ref, ref], senses)
    assert cmp["hypervolume"][0] == grid_area([a], senses, ref)
    assert cmp["hypervolume"][1] == grid_area([b], senses, ref)
    assert cmp["hypervolume"][1] > cmp["hypervolume"][0]


def test_a_front_beyond_another_covers_it_and_holds_the_whole_combined_front():
    # Zitzler & Thiele 1999, eq. 7: C(B, A) = 1 and C(A, B) = 0 when B lies beyond A
    senses = ("max", "max")
    a = staircase(5, 10)
    b = a + 1.0
    C = coverage([a, b], senses)
    assert C[1, 0] == 1.0 and C[0, 1] == 0.0 and C[0, 0] == 1.0
    rows = dominance_stretches([a, b], senses, [0.0, 0.0])
    assert [(r["run"], r["points"]) for r in rows] == [(1, len(b))]
    assert rows[0]["share"] == pytest.approx(1.0)


def test_interleaved_fronts_alternate_along_the_combined_front():
    senses = ("max", "max")
    pts = staircase(8, 12)
    a, b = pts[0::2], pts[1::2]
    rows = dominance_stretches([a, b], senses, [0.0, 0.0])
    # best first objective first: the largest x belongs to b (index 7), then a, ...
    assert [r["run"] for r in rows] == [1, 0] * 4
    total = grid_area([a, b], senses, [0, 0])
    for r, p in zip(rows, pts[::-1], strict=True):
        without = [q for q in pts if not onp.array_equal(q, p)]
        assert r["exclusive_hypervolume"] == total - grid_area([onp.array(without)], senses,
                                                               [0, 0])
    C = coverage([a, b], senses)
    assert C[0, 1] == 0.0 and C[1, 0] == 0.0   # neither dominates a point of the other


def test_partial_coverage_counts_the_dominated_share():
    senses = ("max", "max")
    a = staircase(4, 10)                      # (1,9) (2,8) (3,7) (4,6)
    b = onp.array([[2.0, 8.0], [5.0, 1.0]])   # ties (2,8); (5,1) lies beyond a's x range
    C = coverage([a, b], senses)
    expected_ab = onp.mean([onp.any(onp.all(a >= q, axis=1)) for q in b])
    expected_ba = onp.mean([onp.any(onp.all(b >= q, axis=1)) for q in a])
    assert C[0, 1] == expected_ab and C[1, 0] == expected_ba


@pytest.mark.parametrize("senses,refs,expected", [
    (("max", "max"), [[1.0, 0.0], [0.5, 0.2]], [0.5, 0.0]),
    (("max", "min"), [[1.0, 2.0], [0.5, 3.0]], [0.5, 3.0]),
])
def test_common_reference_is_the_worst_of_differing_references(senses, refs, expected):
    # common practice, no source: the point every run's own reference dominates
    ref, how = common_reference(refs, senses)
    assert ref == expected and "differ" in how
    assert common_reference([refs[0], refs[0]], senses)[0] == refs[0]


def test_runs_with_other_objectives_are_refused_in_one_line():
    with pytest.raises(InputError) as err:
        same_objectives(["a", "b"], [["g@700nm", "docp@700nm"], ["g@700nm", "u@700nm"]],
                        [("max", "max"), ("max", "max")])
    text = str(err.value)
    assert "\n" not in text and "a and b" in text and "u@700nm" in text
    with pytest.raises(InputError):   # the same labels with another sense
        same_objectives(["a", "b"], [["g@700nm"], ["g@700nm"]], [("max",), ("min",)])


def test_map_encoding_keeps_values_to_its_quantization():
    rng = onp.random.default_rng(3)
    a = rng.normal(size=(7, 7))
    m = encode_map(a)
    assert onp.max(onp.abs(decode_map(m) - a)) <= (a.max() - a.min()) / 510 + 1e-12


# --------------------------------------------------------------------------- real runs

def test_report_of_a_real_run_holds_its_front(report_runs):
    from chiropt.report.html import page_data
    from chiropt.report.runs import load_run

    run = load_run(report_runs["si"])
    with (run.path / "front.csv").open() as fh:
        n_rows = sum(1 for line in fh if not line.startswith("#")) - 1
    data = page_data([run], run.path)
    (r,) = data["runs"]
    assert len(r["front"]) == n_rows == len(r["details"])
    assert r["hypervolume"] == pytest.approx(run.summary["hypervolume"])
    # each front row is the stored evaluation front.csv names
    for row, rec in zip(run.front, run.front_records, strict=True):
        assert [row[p] for p in run.problem.paths] == pytest.approx(list(rec.x), rel=1e-12)
    d = r["details"]["0"]
    assert d["errors"] == [] and d["maps"]["u"]["n"] == 24
    assert d["spectra"]["wavelength_nm"][0] < 700 < d["spectra"]["wavelength_nm"][-1]


def test_reported_spectrum_matches_a_fresh_evaluation(report_runs):
    # the detail spectra are the run model's own numbers (chiropt.evaluate on the design)
    from chiropt.report.details import design_detail
    from chiropt.report.runs import load_run
    from chiropt.response import evaluate

    run = load_run(report_runs["si"])
    x = run.front_records[0].x
    d = design_detail(run.problem, x, points=5)
    wl = d["spectra"]["wavelength_nm"]
    r = evaluate(run.problem.design_at(x).with_wavelengths(wl))
    assert d["spectra"]["T+1"] == pytest.approx(r.T[:, 0], rel=1e-4)
    assert d["spectra"]["g"] == pytest.approx(r.metrics["g"], rel=1e-4)


def test_compare_runs_with_other_variables_and_materials(report_runs, tmp_path, capsys):
    from chiropt.report.runs import load_run
    from chiropt.search.pareto import hypervolume

    si, tio2 = load_run(report_runs["si"]), load_run(report_runs["tio2"])
    assert si.problem.paths != tio2.problem.paths and si.goal.material != tio2.goal.material
    out = tmp_path / "cmp"
    assert main(["compare", str(si.path), str(tio2.path), "--out", str(out)]) == 0
    with (out / "runs.csv").open() as fh:
        rows = list(csv.DictReader(fh))
    assert [r["run"] for r in rows] == [si.name, tio2.name]
    for r, run in zip(rows, (si, tio2), strict=True):
        expected = hypervolume(run.nondominated, run.senses, si.reference)
        assert float(r["hypervolume"]) == pytest.approx(expected, rel=1e-5)
        assert r["material"] == run.goal.material
    assert (out / "fronts.png").stat().st_size > 0
    assert "## Which run holds the combined front where" in (out / "README.md").read_text()


def test_cli_refuses_runs_with_other_objectives(report_runs, tmp_path, capsys):
    args = [str(report_runs["si"]), str(report_runs["other"])]
    assert main(["compare", *args, "--out", str(tmp_path / "c")]) == 2
    assert main(["report", *args, "--out", str(tmp_path / "r.html")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and all("different objectives" in e for e in err)
    assert not (tmp_path / "c" / "runs.csv").exists() and not (tmp_path / "r.html").exists()


def test_cli_refuses_a_folder_that_is_not_a_run(tmp_path, capsys):
    assert main(["report", str(tmp_path)]) == 2
    assert "not a run folder" in capsys.readouterr().err


def test_failures_are_grouped_by_reason_and_constraints_counted(report_runs):
    # common practice, no source: counts of a run whose records the test rewrites
    from dataclasses import replace

    from chiropt.report.runs import FEASIBILITY_TOL, constraint_activity, failures, load_run

    run = load_run(report_runs["si"])
    reasons = ["Rayleigh anomaly at 700 nm", "singular interaction matrix"]
    recs = list(run.records)
    bad = {i: reasons[i % 3 == 0] for i in range(1, len(recs), 4)}
    for i, why in bad.items():
        recs[i] = replace(recs[i], evaluation=replace(recs[i].evaluation, status="failed",
                                                      reason=why, metrics={}))
    # constraint rows set to known values: a third violated, a third active, a third slack
    n_ok = 0
    for i, r in enumerate(recs):
        if i in bad:
            continue
        value = [1.0, -0.5 * FEASIBILITY_TOL, -0.3][n_ok % 3]
        g = [value] * len(run.problem.constraint_labels)
        recs[i] = replace(r, evaluation=replace(r.evaluation, metrics={
            **r.evaluation.metrics, "constraints": g}))
        n_ok += 1
    run.records = recs
    groups = failures(run)
    expected = {why: sum(1 for w in bad.values() if w == why) for why in reasons}
    assert {g["reason"]: g["count"] for g in groups} == expected
    assert [g["count"] for g in groups] == sorted(expected.values(), reverse=True)
    act = constraint_activity(run)
    assert len(act) == len(run.problem.constraint_labels)
    for row in act:
        assert row["violated"] == pytest.approx(len(range(0, n_ok, 3)) / n_ok)
        assert row["active"] == pytest.approx(len(range(1, n_ok, 3)) / n_ok)


def test_details_are_limited_to_a_spread_of_the_front(report_runs):
    from chiropt.report.html import page_data
    from chiropt.report.runs import load_run

    run = load_run(report_runs["si"])
    (r,) = page_data([run], run.path, details=2)["runs"]
    assert sorted(map(int, r["details"])) == [0, len(run.front) - 1]


def test_a_run_of_one_objective_reads_back(tmp_path):
    # the resolved goal of one objective carries a search.front section the schema refuses
    # for one objective; the report reads it all the same
    from chiropt.goals import load_goal
    from chiropt.report.html import page_data
    from chiropt.report.runs import load_run
    from chiropt.run import run_goal

    from conftest import RADIUS_PERIOD, REPORT_GOAL

    text = REPORT_GOAL.format(name="one", material="Si", variables=RADIUS_PERIOD,
                              second="docp")
    text = text.replace("  - {maximize: docp, at_nm: 700}\n", "").replace(
        "  front: {method: epsilon-constraint, points: 3, reference: {g: 0.5, docp: 0.0}}\n",
        "")
    (tmp_path / "one.yaml").write_text(text)
    (goal,) = load_goal(tmp_path / "one.yaml")
    summary = run_goal(goal, out=tmp_path / "runs", workers=0, progress=False)
    run = load_run(summary.run_dir)
    assert run.labels == ["g@700nm"] and len(run.front) == len(summary.front) >= 1
    (r,) = page_data([run], run.path, details=1)["runs"]
    best = max(row["g@700nm"] for row in run.front)
    assert r["convergence"]["overall"][-1] == pytest.approx(best)
