"""Tests of tracker.structures.ideal against the definitions of the ideal images.

The ideal images are rebuilt here from their definitions (Wasserman & Faust 1994,
sec. 10.3; the project's FIELD.md, section 2), independently of the module's own
templates, and compared by brute force over all orderings.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.errors import UsageError
from tracker.structures.ideal import (
    IDEALS,
    IdealFit,
    classify_image,
    closest_ideal,
    density_image,
    ideal_significance,
)


# ---------------------------------------------------------------- definitions


def ideal_in_rank_order(ideal: str, n_pos: int, n_core: int = 1, variant: str = "to-centre") -> np.ndarray:
    """t[k, l] for ranks k, l, straight from the definitions (W&F 1994, sec. 10.3)."""
    k, l = np.indices((n_pos, n_pos))
    if ideal == "cohesive-subgroups":
        t = k == l
    elif ideal == "core-periphery":
        t = (k < n_core) | (l < n_core)  # core = first n_core ranks
    elif ideal == "centralized":
        t = (l == 0) if variant == "to-centre" else (k == 0)  # centre = rank 0
    elif ideal == "hierarchy":
        t = l == k - 1
    else:  # transitive
        t = l < k
    return t.astype(int)


def plant(template: np.ndarray, order) -> np.ndarray:
    """The image whose positions order[0], order[1], ... hold ranks 0, 1, ..."""
    order = np.asarray(order)
    image = np.zeros_like(template)
    image[np.ix_(order, order)] = template
    return image


def brute_force_mismatches(image: np.ndarray, ideal: str) -> int:
    """Minimum mismatches over every ordering (and core size, variant): the definition."""
    n_pos = image.shape[0]
    if ideal == "core-periphery":
        shapes = [dict(n_core=s) for s in range(1, n_pos)]
    elif ideal == "centralized":
        shapes = [dict(variant=v) for v in ("to-centre", "from-centre")]
    else:
        shapes = [{}]
    best = n_pos * n_pos
    for shape in shapes:
        t = ideal_in_rank_order(ideal, n_pos, **shape)
        for order in itertools.permutations(range(n_pos)):
            order = np.array(order)
            best = min(best, int(np.abs(image[np.ix_(order, order)] - t).sum()))
    return best


def expected_perfect(ideal: str, n_pos: int) -> set[str]:
    """Ideals a perfect planted image also fits exactly.

    For B = 2 the hierarchy and the transitive images are the same single tie
    1 -> 0.  No other pair coincides for B = 2..7: the images differ in their
    number of 1s (B, B^2 - (B - |C|)^2, B, B - 1, B(B - 1)/2) or in their diagonal
    (cohesive B ones, centralized one, transitive none) -- checked here by the
    test itself, which would fail on any other coincidence.
    """
    if n_pos == 2 and ideal in ("hierarchy", "transitive"):
        return {"hierarchy", "transitive"}
    return {ideal}


# ---------------------------------------------------------------- planted structures


@st.composite
def planted_images(draw, min_pos=2, max_pos=7):
    n_pos = draw(st.integers(min_pos, max_pos))
    ideal = draw(st.sampled_from(IDEALS))
    n_core = draw(st.integers(1, n_pos - 1))
    variant = draw(st.sampled_from(["to-centre", "from-centre"]))
    order = draw(st.permutations(range(n_pos)))
    template = ideal_in_rank_order(ideal, n_pos, n_core=n_core, variant=variant)
    return ideal, n_core, variant, list(order), plant(template, order)


@settings(max_examples=80, deadline=None)
@given(planted_images())
def test_planted_structure_is_named(case):
    # a perfect image of each ideal (definitions: W&F 1994, sec. 10.3) fits it exactly
    ideal, n_core, variant, order, image = case
    n_pos = image.shape[0]
    fits = closest_ideal(image)
    keys = [(f.mismatches, IDEALS.index(f.ideal)) for f in fits]
    assert keys == sorted(keys) and len(fits) == len(IDEALS)
    exact = {f.ideal for f in fits if f.mismatches == 0}
    assert fits[0].mismatches == 0
    assert ideal in exact
    assert exact == expected_perfect(ideal, n_pos)
    if exact == {ideal}:
        assert fits[0].ideal == ideal

    fit = next(f for f in fits if f.ideal == ideal)
    assert fit.fit == 1.0
    np.testing.assert_array_equal(fit.ideal_image(), image)
    # roles: the planted core / centre / ranks are reported
    if ideal == "core-periphery":
        assert {k for k, r in fit.roles.items() if r == "core"} == set(order[:n_core])
        assert {k for k, r in fit.roles.items() if r == "periphery"} == set(order[n_core:])
    elif ideal == "centralized":
        assert fit.variant == variant
        assert [k for k, r in fit.roles.items() if r == "centre"] == [order[0]]
    elif ideal in ("hierarchy", "transitive"):
        assert fit.roles[order[0]] == "rank 1 (top)"
        assert all(fit.roles[order[r]] == f"rank {r + 1}" for r in range(1, n_pos))
        assert fit.order == tuple(order)
    else:
        assert set(fit.roles.values()) == {"subgroup"}


@pytest.mark.parametrize("ideal", IDEALS)
def test_heuristic_finds_planted_structure_at_10_positions(ideal):
    # above exact_limit the local search recovers a shuffled perfect image
    # (definitions: W&F 1994, sec. 10.3)
    rng = np.random.default_rng(7)
    order = rng.permutation(10)
    template = ideal_in_rank_order(ideal, 10, n_core=3, variant="from-centre")
    image = plant(template, order)
    fits = closest_ideal(image, seed=3)
    assert fits[0].ideal == ideal
    assert fits[0].mismatches == 0
    if ideal == "core-periphery":
        assert {k for k, r in fits[0].roles.items() if r == "core"} == set(order[:3].tolist())
    if ideal == "centralized":
        assert fits[0].roles[int(order[0])] == "centre" and fits[0].variant == "from-centre"
    if ideal in ("hierarchy", "transitive"):
        assert fits[0].order == tuple(order.tolist())


# ---------------------------------------------------------------- brute force


@settings(max_examples=60, deadline=None)
@given(
    st.integers(2, 5).flatmap(
        lambda b: st.lists(st.integers(0, 1), min_size=b * b, max_size=b * b).map(
            lambda cells: np.array(cells).reshape(b, b)
        )
    )
)
def test_mismatches_equal_brute_force(image):
    # brute force over all orderings (itertools.permutations) of the definitions
    fits = {f.ideal: f for f in closest_ideal(image)}
    n_pos = image.shape[0]
    for ideal in IDEALS:
        fit = fits[ideal]
        assert fit.mismatches == brute_force_mismatches(image, ideal), ideal
        assert fit.fit == pytest.approx(1 - fit.mismatches / n_pos**2)
        assert sorted(fit.order) == list(range(n_pos))
        assert sorted(fit.roles) == list(range(n_pos))
        # the reported ordering really attains the count
        assert int(np.abs(image - fit.ideal_image()).sum()) == fit.mismatches
    # local search can only do as well as exhaustive search, never better
    for fit in closest_ideal(image, exact_limit=0):
        assert fit.mismatches >= fits[fit.ideal].mismatches
        assert int(np.abs(image - fit.ideal_image()).sum()) == fit.mismatches


def test_local_search_matches_exhaustive_search_on_random_images():
    # brute force reference: the exhaustive search checked above, B = 6..8
    rng = np.random.default_rng(11)
    for _ in range(12):
        n_pos = int(rng.integers(6, 9))
        image = (rng.random((n_pos, n_pos)) < rng.uniform(0.2, 0.8)).astype(int)
        exact = {f.ideal: f.mismatches for f in closest_ideal(image)}
        local = {f.ideal: f.mismatches for f in closest_ideal(image, exact_limit=0, seed=1)}
        assert local == exact


# ---------------------------------------------------------------- significance


@pytest.mark.parametrize("ideal", IDEALS)
def test_perfect_structure_is_significant(ideal):
    # a perfect image is matched by chance only with tiny probability, so the
    # Monte Carlo p-value is its floor 1 / (draws + 1) (common practice)
    rng = np.random.default_rng(2)
    image = plant(ideal_in_rank_order(ideal, 6, n_core=2), rng.permutation(6))
    fit = next(f for f in closest_ideal(image) if f.ideal == ideal)
    p = ideal_significance(image, fit, draws=199, seed=4)
    assert p == pytest.approx(1 / 200)
    assert ideal_significance(image, fit, draws=199, seed=4) == p  # same seed, same p


def test_random_images_are_not_significant_on_average():
    # images drawn from the null (uniform ties at a fixed density) give p-values
    # that are at least uniform: mean >= 1/2, P(p <= 0.05) <= 0.05 (common practice
    # for Monte Carlo tests); loose bounds keep the check stable
    rng = np.random.default_rng(0)
    pvals = []
    for i in range(25):
        image = (rng.random((5, 5)) < 0.4).astype(int)
        pvals += [f.p_value for f in classify_image(image, draws=99, seed=i)]
    pvals = np.array(pvals)
    assert pvals.mean() > 0.35
    assert np.mean(pvals <= 0.05) < 0.15


def test_empty_image_is_never_significant():
    # every random image of density 0 is the image itself: p = 1 (definition)
    image = np.zeros((4, 4), dtype=int)
    assert all(f.p_value == 1.0 for f in classify_image(image, draws=19))


# ---------------------------------------------------------------- details and errors


def test_tie_order_is_the_order_of_ideals():
    # B = 2, tie 1 -> 0: hierarchy and transitive coincide; IDEALS order breaks the tie
    fits = closest_ideal(np.array([[0, 0], [1, 0]]))
    assert [f.ideal for f in fits[:2]] == ["hierarchy", "transitive"]
    assert fits[0].roles == {0: "rank 1 (top)", 1: "rank 2"}


def test_subset_of_ideals_and_fit_type():
    fits = closest_ideal(np.eye(3, dtype=bool), ideals=["transitive", "cohesive-subgroups"])
    assert [f.ideal for f in fits] == ["cohesive-subgroups", "transitive"]
    assert isinstance(fits[0], IdealFit) and fits[0].p_value is None


@pytest.mark.parametrize(
    "image, kwargs",
    [
        (np.zeros((3, 4)), {}),
        (np.zeros((2, 2, 2)), {}),
        (np.array([[1]]), {}),
        (np.array([[0, 2], [1, 0]]), {}),
        (np.eye(3), {"ideals": ["star"]}),
        (np.eye(3), {"ideals": []}),
        (np.eye(3), {"exact_limit": 12}),
    ],
)
def test_usage_errors(image, kwargs):
    with pytest.raises(UsageError):
        closest_ideal(image, **kwargs)


def test_significance_rejects_mismatched_fit_and_draws():
    fit = closest_ideal(np.eye(3))[0]
    with pytest.raises(UsageError):
        ideal_significance(np.eye(4), fit)
    with pytest.raises(UsageError):
        ideal_significance(np.eye(3), fit, draws=0)


# ---------------------------------------------------------------- density images (judged on the ties)


def brute_force_inconsistency(image: np.ndarray, ideal: str) -> float:
    """Minimum of sum |density - ideal| over every ordering, core size and variant: the definition."""
    n_pos = image.shape[0]
    shapes = ([dict(n_core=s) for s in range(1, n_pos)] if ideal == "core-periphery"
              else [dict(variant=v) for v in ("to-centre", "from-centre")] if ideal == "centralized" else [{}])
    return min(float(np.abs(image[np.ix_(o, o)] - ideal_in_rank_order(ideal, n_pos, **shape)).sum())
               for shape in shapes for o in map(np.array, itertools.permutations(range(n_pos))))


@settings(max_examples=25, deadline=None)
@given(st.integers(2, 5).flatmap(
    lambda b: st.lists(st.floats(0, 1), min_size=b * b, max_size=b * b).map(lambda c: np.array(c).reshape(b, b))))
def test_density_image_inconsistencies_equal_brute_force(image):
    # brute force over all orderings of the definition: normalised block inconsistencies
    # (Doreian, Batagelj & Ferligoj 2005: null block -> share of cells with a tie,
    # complete block -> share of cells without one)
    for fit in closest_ideal(image):
        assert fit.mismatches == pytest.approx(brute_force_inconsistency(image, fit.ideal), abs=1e-9)
        assert float(np.abs(image - fit.ideal_image()).sum()) == pytest.approx(fit.mismatches, abs=1e-9)
    for fit in closest_ideal(image, exact_limit=0):
        assert fit.mismatches >= brute_force_inconsistency(image, fit.ideal) - 1e-9


def test_density_image_counts_normalised_block_inconsistencies():
    # one stray tie in a null block of 80 cells costs 1/80, one missing tie in a complete
    # 90-cell diagonal block 1/90 (relative=False: the plain normalised counts)
    ties = np.array([[89, 1], [0, 90]])
    possible = np.array([[90, 80], [80, 90]])
    image = density_image(ties, possible, relative=False)
    fit = next(f for f in closest_ideal(image) if f.ideal == "cohesive-subgroups")
    assert fit.mismatches == pytest.approx(1 / 90 + 1 / 80)
    assert density_image(ties, possible).max() == 1.0  # relative: the densest block counts as complete
    with pytest.raises(UsageError):
        density_image([[3]], [[2]])


def test_density_image_significance_shuffles_the_blocks():
    rng = np.random.default_rng(3)
    image = ideal_in_rank_order("cohesive-subgroups", 5) * 0.97 + rng.random((5, 5)) * 0.03
    fit = closest_ideal(image)[0]
    assert fit.ideal == "cohesive-subgroups"
    assert ideal_significance(image, fit, draws=99, seed=1) == pytest.approx(0.01)
    flat = np.full((4, 4), 0.3)  # every block alike: nothing to find
    assert ideal_significance(flat, closest_ideal(flat)[0], draws=19) == 1.0
