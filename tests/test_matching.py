"""Tests for audit.evidence.matching: optimal assignment of poles/zeros between two models."""

from __future__ import annotations

import itertools
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from audit.errors import InvalidModelError
from audit.evidence.matching import match_points


def _brute_force_cost(p1, p2, floor):
    """Minimum total relative distance over all injective assignments (independent:
    exhaustive enumeration with itertools, no scipy)."""
    p1, p2 = list(p1), list(p2)
    swap = len(p1) > len(p2)
    if swap:
        p1, p2 = p2, p1
    best = float("inf")
    for chosen in itertools.permutations(range(len(p2)), len(p1)):
        total = 0.0
        for i, j in enumerate(chosen):
            a, b = p1[i], p2[j]
            total += abs(a - b) / max(abs(a), abs(b), floor)
        best = min(best, total)
    return 0.0 if not p1 else best


def test_permutation_recovered_exactly():
    rng = np.random.default_rng(0)
    pts = np.concatenate([[-1e-3, -1.0, -1e4], -2.0 + 3.0j * np.arange(1, 4), -2.0 - 3.0j * np.arange(1, 4)])
    perm = rng.permutation(pts.size)
    m = match_points(pts, pts[perm])
    # exact permutation: pair (i, j) must satisfy perm[j] == i (constructed by the test)
    assert [(q.first_index, q.second_index) for q in m.pairs] == sorted((int(perm[j]), j) for j in range(pts.size))
    assert all(q.absolute_distance == 0.0 for q in m.pairs)  # identical numbers: exact zero
    assert m.unmatched_first == m.unmatched_second == ()
    assert m.total_cost == 0.0


def test_known_moved_pole_is_largest_move():
    p1 = [-1e-3, -0.5 + 2j, -0.5 - 2j, -1e3, -1e6]
    p2 = [-1e6 * (1 + 1e-9), -1.02e3, -0.5 - 2j, -1e-3, -0.5 + 2j]  # -1e3 moved by 2 %
    m = match_points(p1, p2)
    lm = m.largest_move
    assert (lm.first_index, lm.second_index) == (3, 1)
    # closed form: |(-1e3) - (-1.02e3)| / 1.02e3 (common practice, no source)
    assert lm.relative_distance == pytest.approx(20.0 / 1020.0, rel=1e-12)
    assert lm.absolute_distance == pytest.approx(20.0, rel=1e-12)


def test_relative_cost_is_scale_aware():
    # an absolute cost would pair -1e-3 with -1 and leave -1e6 'moved' hugely; the
    # relative cost keeps each decade with its partner (closed form, no source)
    m = match_points([-1e-3, -1.0, -1e6], [-1.1e6, -1.2e-3, -0.9])
    assert [(q.first_index, q.second_index) for q in m.pairs] == [(0, 1), (1, 2), (2, 0)]


def test_unequal_counts_list_unmatched():
    m = match_points([-1.0, -2.0, -30.0], [-2.0 * (1 + 1e-12), -1.0])
    assert [(q.first_index, q.second_index) for q in m.pairs] == [(0, 1), (1, 0)]
    assert m.unmatched_first == (2,)
    assert m.unmatched_first_points == (-30.0 + 0j,)
    assert m.unmatched_second == ()
    m2 = match_points([-5.0], [-100.0, -5.0, 7.0])
    assert m2.unmatched_second == (0, 2)
    assert [(q.first_index, q.second_index) for q in m2.pairs] == [(0, 1)]


def test_empty_sets():
    m = match_points([], [-1.0, -2.0])
    assert m.pairs == () and m.largest_move is None and m.unmatched_second == (0, 1)
    assert match_points([], []).total_cost == 0.0


def test_points_at_origin_use_floor():
    # integrators: 0 vs 1e-15 with default floor 1e-8 * 10 -> relative 1e-8 (closed form)
    m = match_points([0.0, -10.0], [1e-15, -10.0])
    pair = next(q for q in m.pairs if q.first_index == 0)
    assert pair.relative_distance == pytest.approx(1e-15 / 1e-7, rel=1e-12)
    assert m.floor == pytest.approx(1e-7, rel=1e-15)


def test_as_dict_json_friendly():
    m = match_points([-1 + 1j, -1 - 1j], [-1 - 1.1j, -1 + 1j])
    back = json.loads(json.dumps(m.as_dict()))
    assert back["largest_move"]["first"] == [-1.0, -1.0]
    assert back["largest_move"]["second"] == [-1.0, -1.1]


@pytest.mark.parametrize(
    "points, fragment",
    [
        ([[1.0, 2.0], [3.0, 4.0]], "points1: has shape (2, 2)"),
        ([1.0, float("nan")], "points1: contains NaN or infinity"),
        ([1.0, float("inf")], "points1: contains NaN or infinity"),
        (["a"], "points1: could not be read"),
    ],
    ids=["2d", "nan", "inf", "text"],
)
def test_bad_points_raise(points, fragment):
    with pytest.raises(InvalidModelError, match=fragment.replace("(", r"\(").replace(")", r"\)")):
        match_points(points, [1.0])


def test_bad_floor_raises():
    with pytest.raises(InvalidModelError, match="floor: got 0.0"):
        match_points([1.0], [1.0], floor=0.0)


@settings(max_examples=50, deadline=None)
@given(data=st.data())
def test_property_optimal_against_brute_force(data):
    k1 = data.draw(st.integers(0, 6), label="k1")
    k2 = data.draw(st.integers(0, 6), label="k2")
    seed = data.draw(st.integers(0, 2**32 - 1), label="seed")
    rng = np.random.default_rng(seed)

    def draw(k):
        mag = 10.0 ** rng.uniform(-3, 3, k)
        return mag * np.exp(1j * rng.uniform(0.5 * np.pi, 1.5 * np.pi, k))

    p1, p2 = draw(k1), draw(k2)
    m = match_points(p1, p2)
    assert len(m.pairs) == min(k1, k2)
    assert len(m.unmatched_first) == k1 - len(m.pairs) and len(m.unmatched_second) == k2 - len(m.pairs)
    # independent: exhaustive search over all assignments (itertools)
    assert m.total_cost == pytest.approx(_brute_force_cost(p1, p2, m.floor), rel=1e-12, abs=1e-15)
    # every index used at most once
    assert len({q.first_index for q in m.pairs}) == len({q.second_index for q in m.pairs}) == len(m.pairs)
