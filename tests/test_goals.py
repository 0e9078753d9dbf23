"""Goal files: schema errors, objective/constraint construction, exact gradients."""

from __future__ import annotations

import math
import textwrap

import numpy as onp
import pytest

from chiropt.errors import InputError
from chiropt.goals import EXPLAIN, GoalProblem, check_goal, load_goal
from chiropt.goals.schema import parse_wall_time
from scenarios import RADIUS_AND_PERIOD, SPHERE_ON_GLASS

DESIGN = SPHERE_ON_GLASS.replace("  region: {kind: plane, height_nm: 10}\n", "")
VARIABLES = RADIUS_AND_PERIOD
OBJECTIVES = """\
objectives:
  - {maximize: A, at_nm: 700}
"""


def _goal(tmp_path, text: str, name: str = "g.yaml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path


def _load(tmp_path, text):
    return load_goal(_goal(tmp_path, text))


def test_minimal_goal_resolves_with_defaults(tmp_path):
    (goal,) = _load(tmp_path, "name: t\n" + DESIGN + VARIABLES + OBJECTIVES)
    assert goal.run_name == "t-Si"
    d = goal.to_dict()
    assert d["search"]["algorithm"] == "SLSQP" and d["seed"] == 1
    assert d["variables"]["lattice.period_nm"] == {"min": 300.0, "max": 520.0}


def test_resolved_goal_of_one_objective_loads_again(tmp_path):
    # common practice, no source: goal.resolved.yaml (to_dict, as the run writes it) is a
    # valid goal file; a one-objective goal's default front section must not be refused,
    # while a non-default one still is
    import yaml
    (goal,) = _load(tmp_path, "name: t\n" + DESIGN + VARIABLES + OBJECTIVES)
    path = tmp_path / "resolved.yaml"
    path.write_text(yaml.safe_dump(goal.to_dict(), sort_keys=False))
    (again,) = load_goal(path)
    assert again.to_dict() == goal.to_dict()
    data = goal.to_dict()
    data["search"]["front"]["points"] = 4
    path.write_text(yaml.safe_dump(data, sort_keys=False))
    with pytest.raises(InputError, match="search.front"):
        load_goal(path)


@pytest.mark.parametrize("text, key, words", [
    # unknown top-level key: closest valid key suggested, with its line
    (DESIGN + VARIABLES + OBJECTIVES + "constrains: []\n", "constrains",
     [":12", "did you mean 'constraints'"]),
    # swapped bounds
    (DESIGN + "variables:\n  lattice.period_nm: {min: 520, max: 300}\n" + OBJECTIVES,
     "variables.lattice.period_nm.min", ["swap", ":8"]),
    # unknown variable path lists the design's quantities
    (DESIGN + "variables:\n  particles[0].radius: {min: 50, max: 90}\n" + OBJECTIVES,
     "variables.particles[0].radius", ["particles[0].radius_nm", "lattice.period_nm"]),
    # unknown metric, closest name
    (DESIGN + VARIABLES + "objectives:\n  - {maximize: Abs, at_nm: 700}\n",
     "objectives[0].maximize", ["allowed", "did you mean"]),
    # near-field metric without a region
    (DESIGN + VARIABLES + "objectives:\n  - {maximize: g, at_nm: 700}\n",
     "objectives[0].maximize", ["region"]),
    # metric bounds that cannot hold
    (DESIGN + VARIABLES + OBJECTIVES + "constraints:\n  - {metric: T, min: 0.8, max: 0.2}\n",
     "constraints[0].min", ["exceeds", ":13"]),
    # unknown algorithm
    (DESIGN + VARIABLES + OBJECTIVES + "search: {algorithm: SLSPQ}\n", "search.algorithm",
     ["SLSQP"]),
    # bad key inside the inline design: prefixed with design. and its line
    (DESIGN.replace("radius_nm: 75", "radius_mn: 75") + VARIABLES + OBJECTIVES,
     "design.particles[0].radius_mn", ["did you mean 'radius_nm'", ":4"]),
    # bad fabrication kind
    (DESIGN + VARIABLES + OBJECTIVES + "constraints:\n  - {fabrication: min_gap, value: 40}\n",
     "constraints[0].fabrication", ["min_gap_nm"]),
    # a front setting with one objective
    (DESIGN + VARIABLES + OBJECTIVES + "search: {front: {points: 5}}\n", "search.front",
     ["two objectives"]),
    # a linked quantity that is also a variable
    (DESIGN.replace("kind: square, period_nm: 420", "kind: rectangular, period_nm: [420, 420]")
     + "variables:\n  lattice.period_nm[0]: {min: 300, max: 500}\n"
       "  lattice.period_nm[1]: {min: 300, max: 500}\n" + OBJECTIVES
     + "links:\n  lattice.period_nm[1]: lattice.period_nm[0]\n", "links.lattice.period_nm[1]",
     ["variable"]),
    (DESIGN + VARIABLES + OBJECTIVES + "budget: {wall_time: 8 hours}\n", "budget.wall_time",
     ["8h"]),
])  # fmt: skip
def test_schema_errors_name_key_line_and_fix(tmp_path, text, key, words):
    # DEVELOPERS.md (errors for users): key path, file:line, allowed values, closest key
    with pytest.raises(InputError) as info:
        _load(tmp_path, text)
    assert info.value.key == key
    msg = str(info.value)
    assert "g.yaml:" in msg
    for w in words:
        assert w in msg


@pytest.mark.parametrize("constraint, key, words", [
    # the largest diameter the radius bound allows (2 x 110 nm) is below the limit
    ("{fabrication: min_feature_nm, value: 240}", "constraints[0].value", ["220"]),
    # at the smallest radius (50 nm) and largest period (520 nm) the gap is 420 nm at most
    ("{fabrication: min_gap_nm, value: 450}", "constraints[0].value", ["420"]),
    # a sphere's aspect ratio is 1
    ("{fabrication: max_aspect_ratio, value: 0.5}", "constraints[0].value", ["1"]),
    # silicon data (Green 2008) stop at 1450 nm
    ("{metric: T, min: 0.1, band_nm: [1300, 1500]}", "constraints[0].band_nm", ["1450"]),
])  # fmt: skip
def test_impossible_constraints_caught_before_the_run(tmp_path, constraint, key, words):
    # common practice, no source: simple geometry of spheres in a square lattice
    (goal,) = _load(tmp_path, DESIGN + VARIABLES + OBJECTIVES
                    + f"constraints:\n  - {constraint}\n")
    with pytest.raises(InputError) as info:
        check_goal(goal)
    assert info.value.key == key
    assert "g.yaml:13" in str(info.value)
    for w in words:
        assert w in str(info.value)


def test_fabrication_limits_jointly_impossible(tmp_path):
    # gap >= 300 needs r <= (520 - 300)/2 = 110 at most but feature >= 200 needs r >= 100:
    # together possible only near r in [100, 110] with period 520 -> feasible; tighten gap
    text = (DESIGN + VARIABLES + OBJECTIVES + "constraints:\n"
            "  - {fabrication: min_gap_nm, value: 330}\n"
            "  - {fabrication: min_feature_nm, value: 200}\n")
    (goal,) = _load(tmp_path, text)
    with pytest.raises(InputError, match="cannot all hold at once"):
        check_goal(goal)


def test_wavelength_variable_range_checked_against_material_data(tmp_path):
    text = (DESIGN + "variables:\n  wavelength_nm: {min: 600, max: 1500}\n" + OBJECTIVES)
    (goal,) = _load(tmp_path, text)
    with pytest.raises(InputError, match="leave the data range"):
        check_goal(goal)  # Si (Green 2008) ends at 1450 nm


def test_materials_make_one_goal_each(tmp_path):
    goals = _load(tmp_path, DESIGN + "materials: [Si, TiO2]\n" + VARIABLES + OBJECTIVES)
    assert [g.run_name for g in goals] == ["g-Si", "g-TiO2"]
    assert goals[1].design.particles[0].material == "TiO2"
    with pytest.raises(InputError, match="did you mean|unknown|short name"):
        _load(tmp_path, DESIGN + "materials: [Si, Tio3]\n" + VARIABLES + OBJECTIVES)


@pytest.mark.parametrize("text, seconds", [("8h", 28800.0), ("90m", 5400.0),
                                           ("1h30m", 5400.0), ("45s", 45.0), (120, 120.0)])
def test_wall_time_parsing(text, seconds):
    # common practice, no source
    assert parse_wall_time(text) == seconds


def test_explain_documents_every_key():
    for key in ("design", "materials", "variables", "links", "fixed", "objectives",
                "constraints", "search", "budget", "seed", "at_nm", "band_nm", "weighted",
                "normalize", "min_gap_nm", "min_feature_nm", "max_aspect_ratio",
                "epsilon-constraint", "weighted-sum", "max_evals_per_start"):
        assert key in EXPLAIN


FULL = DESIGN + """\
variables:
  particles[0].radius_nm: {min: 50, max: 110}
  lattice.period_nm: {min: 300, max: 520}
  wavelength_nm: {min: 650, max: 750}
fixed: {gap_nm: 5}
objectives:
  - {maximize: {weighted: {A: 2.0, R+1: 0.5}, normalize: {A: 0.1}}, at_nm: 700}
  - {minimize: R, band_nm: [680, 720], points: 3}
constraints:
  - {metric: T, min: 0.1, max: 0.99}
  - {fabrication: min_gap_nm, value: 40}
  - {fabrication: min_feature_nm, value: 40}
"""


def test_objectives_and_constraints_match_their_definitions(tmp_path):
    (goal,) = _load(tmp_path, FULL)
    assert goal.design.gap_nm == 5.0  # fixed applied to the base design
    P = GoalProblem(goal)
    # one call at the union of every wavelength: 680, 700, 720 (design's own is 700)
    assert P.wavelengths_nm.tolist() == [680.0, 700.0, 720.0]
    x = onp.array([80.0, 400.0, 710.0])  # the wavelength variable shifts all by +10 nm
    ev = P.evaluate(x, False)
    q = {k: onp.asarray(v) for k, v in ev.metrics["quantities"].items()}
    assert ev.metrics["wavelength_nm"] == [690.0, 710.0, 730.0]
    A = 0.5 * (q["A+1"] + q["A-1"])
    R = 0.5 * (q["R+1"] + q["R-1"])
    T = 0.5 * (q["T+1"] + q["T-1"])
    # definitions of schema.py: weighted sum of normalized metrics, band average, scaling
    assert ev.f[0] == pytest.approx(2.0 * A[1] / 0.1 + 0.5 * q["R+1"][1], rel=1e-12)
    assert ev.f[1] == pytest.approx(R.mean(), rel=1e-12)
    assert ev.g[0] == pytest.approx((0.1 - T[1]) / 1.0, rel=1e-12)
    assert ev.g[1] == pytest.approx((T[1] - 0.99) / 1.0, rel=1e-12)
    # square lattice, one sphere: gap = period - 2 r (common practice, no source)
    assert ev.g[2] == pytest.approx((40 - (400 - 160)) / 40, rel=1e-12)
    assert ev.g[3] == pytest.approx((40 - 160) / 40, rel=1e-12)


def test_exact_jacobian_matches_central_differences(tmp_path):
    (goal,) = _load(tmp_path, FULL)
    P = GoalProblem(goal)
    x = onp.array([80.0, 400.0, 705.0])
    ev = P.evaluate(x, True)
    J = onp.vstack([ev.df, ev.dg])
    h = onp.array([1e-4, 1e-3, 1e-4])
    for k in range(3):  # common practice, no source: central differences
        e = onp.zeros(3)
        e[k] = h[k]
        a, b = P.evaluate(x + e, False), P.evaluate(x - e, False)
        fd = (onp.concatenate([a.f, a.g]) - onp.concatenate([b.f, b.g])) / (2 * h[k])
        assert onp.allclose(J[:, k], fd, rtol=1e-5, atol=1e-8)


def test_candidate_design_reproduces_the_search_values(tmp_path):
    (goal,) = _load(tmp_path, FULL)
    P = GoalProblem(goal)
    x = onp.array([83.0, 410.0, 695.0])
    ev = P.evaluate(x, False)
    fresh = P.design_at(x)
    assert fresh.particles[0].radius_nm == 83.0 and fresh.gap_nm == 5.0
    from chiropt.sensitivity import compute_quantities

    q = compute_quantities(fresh)
    for k, v in ev.metrics["quantities"].items():
        assert onp.allclose(q[k], v, rtol=1e-12, atol=1e-15)


def test_links_follow_their_source(tmp_path):
    text = (DESIGN.replace("kind: square, period_nm: 420", "kind: rectangular, "
                           "period_nm: [420, 420]")
            + "variables:\n  lattice.period_nm[0]: {min: 300, max: 500}\n" + OBJECTIVES
            + "links:\n  lattice.period_nm[1]: lattice.period_nm[0]\n")
    (goal,) = _load(tmp_path, text)
    P = GoalProblem(goal)
    d = P.design_at(onp.array([333.0]))
    assert d.lattice.periods_nm == (333.0, 333.0)


def test_a_failed_evaluation_is_reported_not_raised(tmp_path):
    # period 700/1 nm at 700 nm: the (1,0) order grazes (Rayleigh anomaly), docs/theory.md §5
    text = (DESIGN.replace("  substrate: {material: SiO2}\n", "")
            + "variables:\n  lattice.period_nm: {min: 300, max: 800}\n" + OBJECTIVES)
    (goal,) = _load(tmp_path, text)
    ev = GoalProblem(goal).evaluate(onp.array([700.0]), True)
    assert ev.status == "failed" and "Rayleigh" in ev.reason
    assert math.isnan(ev.f[0])
