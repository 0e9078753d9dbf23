"""Non-dominated filter and hypervolume against literal brute force and hand-worked sets."""

import itertools

import numpy as np
import pytest

from chiropt.errors import InputError
from chiropt.search.pareto import hypervolume, non_dominated

# ---------------------------------------------------------------------------------------------
# literal reference implementations (slow, obvious)


def brute_non_dominated(F, senses):
    """Double loop over pairs, straight from the definition of dominance."""
    sign = np.array([-1.0 if s == "max" else 1.0 for s in senses])
    Z = F * sign
    keep = []
    for i in range(len(Z)):
        if np.any(np.isnan(Z[i])):
            keep.append(False)
            continue
        dominated = False
        for j in range(len(Z)):
            if j == i or np.any(np.isnan(Z[j])):
                continue
            if np.all(Z[j] <= Z[i]) and np.any(Z[j] < Z[i]):
                dominated = True
        keep.append(not dominated)
    return np.array(keep)


def brute_union_volume(Z, r):
    """Exact volume of the union of boxes [z, r] (minimization) by coordinate compression.

    Every elementary cell of the grid built from all coordinates is tested literally against
    every box; exact for any float input.
    """
    Z = np.array([z for z in Z if np.all(z < r)])
    if len(Z) == 0:
        return 0.0
    axes = [np.unique(np.concatenate([Z[:, k], [r[k]]])) for k in range(Z.shape[1])]
    total = 0.0
    for cell in itertools.product(*[range(len(a) - 1) for a in axes]):
        lo = np.array([axes[k][c] for k, c in enumerate(cell)])
        hi = np.array([axes[k][c + 1] for k, c in enumerate(cell)])
        if any(np.all(z <= lo) for z in Z):
            total += float(np.prod(hi - lo))
    return total


def inclusion_exclusion_volume(Z, r):
    """Volume of a union of boxes [z, r] by inclusion-exclusion over all subsets."""
    Z = [z for z in Z if np.all(z < r)]
    total = 0.0
    for size in range(1, len(Z) + 1):
        for subset in itertools.combinations(Z, size):
            corner = np.max(np.array(subset), axis=0)
            total += (-1) ** (size + 1) * float(np.prod(np.clip(r - corner, 0, None)))
    return total


# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "senses", [("min", "min"), ("max", "min"), ("max", "max", "min"), ("min", "min", "min")]
)
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_non_dominated_matches_brute_force(senses, seed):
    # common practice, no source: literal pairwise definition of dominance
    rng = np.random.default_rng(seed)
    F = rng.integers(0, 6, size=(60, len(senses))).astype(float)  # many ties and duplicates
    F[rng.integers(0, 60, 4), rng.integers(0, len(senses), 4)] = np.nan
    np.testing.assert_array_equal(non_dominated(F, senses, chunk=7), brute_non_dominated(F, senses))


def test_non_dominated_worked_example():
    # worked by hand: (3, 4) is dominated by (2, 3); the duplicate (4, 1) rows both stay
    F = np.array([[1, 5], [2, 3], [3, 4], [4, 1], [4, 1], [np.nan, 0]], dtype=float)
    np.testing.assert_array_equal(
        non_dominated(F, ["min", "min"]), [True, True, False, True, True, False]
    )


def test_hypervolume_2d_worked_example():
    # worked by hand: rectangles 4*1 + 3*2 + 1*2 = 12 for reference (5, 6)
    F = np.array([[1, 5], [2, 3], [3, 4], [4, 1]], dtype=float)
    assert hypervolume(F, ["min", "min"], [5, 6]) == pytest.approx(12.0, abs=1e-12)


def test_hypervolume_3d_worked_example():
    # worked by hand: boxes 2*2*1 + 1*1*2 - overlap 1*1*1 = 5 for reference (2, 2, 2)
    F = np.array([[0, 0, 1], [1, 1, 0]], dtype=float)
    assert hypervolume(F, ["min"] * 3, [2, 2, 2]) == pytest.approx(5.0, abs=1e-12)


@pytest.mark.parametrize("seed", range(5))
@pytest.mark.parametrize("senses", [("min", "min"), ("max", "min")])
def test_hypervolume_2d_matches_union_of_rectangles(seed, senses):
    # common practice, no source: literal union of rectangles on the compressed grid
    rng = np.random.default_rng(seed)
    F = rng.uniform(0, 1, size=(25, 2))
    F[3] = F[5]  # a duplicate
    sign = np.array([-1.0 if s == "max" else 1.0 for s in senses])
    r_min = np.array([0.9, 0.95])  # some points fall outside the reference box
    ref = r_min * sign
    expected = brute_union_volume(F * sign, r_min)
    assert hypervolume(F, senses, ref) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("seed", range(5))
def test_hypervolume_3d_matches_inclusion_exclusion(seed):
    # common practice, no source: inclusion-exclusion over all subsets of a small set
    rng = np.random.default_rng(seed)
    F = rng.uniform(0, 1, size=(8, 3))
    ref = np.array([1.0, 1.0, 1.0])
    expected = inclusion_exclusion_volume(F, ref)
    assert hypervolume(F, ["min"] * 3, ref) == pytest.approx(expected, rel=1e-12, abs=1e-15)


@pytest.mark.parametrize("seed", range(4))
def test_hypervolume_3d_matches_grid_count_on_integers(seed):
    # common practice, no source: count the unit cells of an integer grid one by one
    rng = np.random.default_rng(seed)
    F = rng.integers(0, 8, size=(30, 3)).astype(float)  # ties in every coordinate
    ref = np.array([8.0, 8.0, 8.0])
    count = 0
    for cell in itertools.product(range(8), repeat=3):
        if np.any(np.all(F <= np.array(cell), axis=1)):
            count += 1
    assert hypervolume(F, ["min"] * 3, ref) == pytest.approx(float(count), abs=1e-9)


@pytest.mark.parametrize("seed", range(3))
def test_hypervolume_3d_matches_compressed_grid_with_max(seed):
    # common practice, no source: literal union of boxes, maximized objectives
    rng = np.random.default_rng(seed)
    F = rng.uniform(0, 1, size=(15, 3))
    ref = np.array([0.05, 0.05, 0.05])  # maximization: reference below the points
    expected = brute_union_volume(-F, -ref)
    assert hypervolume(F, ["max"] * 3, ref) == pytest.approx(expected, rel=1e-12)


def test_points_not_dominating_reference_add_nothing():
    # worked by hand: a point beyond the reference in one objective adds no volume
    F = np.array([[1.0, 1.0], [0.5, 3.0], [np.nan, 0.0]])
    assert hypervolume(F, ["min", "min"], [2, 2]) == pytest.approx(1.0)
    assert hypervolume(F[1:], ["min", "min"], [2, 2]) == 0.0


def test_hypervolume_rejects_four_objectives():
    with pytest.raises(InputError, match="1 to 3 objectives"):
        hypervolume(np.zeros((2, 4)), ["min"] * 4, np.ones(4))


@pytest.mark.parametrize(
    ("senses", "match"), [(["min", "up"], "unknown sense"), (["min"], "1 senses given")]
)
def test_bad_senses_are_rejected(senses, match):
    with pytest.raises(InputError, match=match):
        non_dominated(np.zeros((3, 2)), senses)


@pytest.mark.parametrize("n", [50, 400])
def test_hypervolume_of_the_zdt1_front_approaches_two_thirds(n):
    # ZDT1 (Zitzler, Deb & Thiele, Evol. Comput. 8, 173 (2000)) has the Pareto front
    # f2 = 1 - sqrt(f1), f1 in [0, 1]; with reference point (1, 1) its hypervolume is
    # integral_0^1 sqrt(f1) df1 = 2/3 (value from memory: the commonly quoted ZDT1
    # optimum 0.6667, also the integral). A staircase of n front points under-covers
    # the curve by less than max step area.
    f1 = np.linspace(0.0, 1.0, n)
    F = np.column_stack([f1, 1.0 - np.sqrt(f1)])
    hv = hypervolume(F, ["min", "min"], [1.0, 1.0])
    assert hv < 2.0 / 3.0
    assert 2.0 / 3.0 - hv < 1.0 / n
