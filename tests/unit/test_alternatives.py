"""Tests of ratescape.decide.alternatives (choice among mutually exclusive alternatives)."""
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from ratescape.decide.alternatives import (
    DO_NOTHING,
    NO_ALTERNATIVE,
    choice_share,
    pad_groups,
    preferred_alternative,
)

# Invented cash flows of three mutually exclusive alternatives (t = 0 .. 5).
FLOWS = np.array([
    [-1000.0, 300, 300, 300, 300, 300],
    [-2500.0, 700, 700, 700, 700, 700],
    [-600.0, 150, 170, 190, 210, 230],
])
RATES = np.array([0.0, 0.04, 0.08, 0.12, 0.16, 0.20, 0.30])


def _pw(flows, rates):
    # numpy_financial.npv discounts values[0] at t = 0 (reference library)
    return np.array([[npf.npv(r, f) for r in rates] for f in flows])


def test_choice_agrees_with_incremental_analysis():
    # Common practice: the alternative of greatest PW is the one that survives
    # pairwise incremental comparisons (challenger beats defender iff the PW
    # of the incremental cash flow, challenger - defender, is > 0), starting
    # from do nothing. PWs from numpy_financial.npv.
    pw = _pw(FLOWS, RATES)
    pref = preferred_alternative(pw)
    for s, r in enumerate(RATES):
        defender = None  # do nothing
        for c in range(len(FLOWS)):
            base = np.zeros(FLOWS.shape[1]) if defender is None else FLOWS[defender]
            if npf.npv(r, FLOWS[c] - base) > 0:
                defender = c
        expected = DO_NOTHING if defender is None else defender
        assert pref.best[s] == expected, (r, pref.best[s], expected)
    # at 30 % every alternative loses money: do nothing
    assert pref.best[-1] == DO_NOTHING
    # at 0 % alternative 1 has the greatest undiscounted total (1000)
    assert pref.best[0] == 1


def test_margin_and_runner_up():
    pw = np.array([[10.0, -5.0, 3.0], [12.0, -8.0, 3.0], [11.0, -1.0, 7.0]])
    pref = preferred_alternative(pw)
    assert pref.best.tolist() == [1, DO_NOTHING, 2]
    assert pref.runner_up.tolist() == [2, 2, 0]  # scenario 2: tie 3 = 3 goes to index 0
    np.testing.assert_allclose(pref.margin, [1.0, 1.0, 4.0], rtol=0, atol=1e-12)


def test_mandatory_group_takes_least_bad():
    pw = np.array([[-3.0, -10.0], [-1.0, -12.0]])
    pref = preferred_alternative(pw, do_nothing=False)
    assert pref.best.tolist() == [1, 0]
    assert pref.runner_up.tolist() == [0, 1]
    np.testing.assert_allclose(pref.margin, [2.0, 2.0])
    # optional: do nothing wins both
    assert preferred_alternative(pw).best.tolist() == [DO_NOTHING, DO_NOTHING]


def test_ties():
    # ties go to the lowest index; a real alternative wins a tie with do nothing
    pref = preferred_alternative(np.array([[5.0, 0.0], [5.0, -1.0]]))
    assert pref.best.tolist() == [0, 0]
    assert pref.runner_up.tolist() == [1, DO_NOTHING]
    assert pref.margin.tolist() == [0.0, 0.0]


def test_single_mandatory_alternative_has_no_runner_up():
    pref = preferred_alternative(np.array([[4.0, -2.0]]), do_nothing=False)
    assert pref.best.tolist() == [0, 0]
    assert pref.runner_up.tolist() == [NO_ALTERNATIVE, NO_ALTERNATIVE]
    assert np.all(np.isnan(pref.margin))


def test_padded_groups_match_one_group_at_a_time():
    rng = np.random.default_rng(1)
    pw = rng.normal(size=(7, 4))
    group = np.array(["g2", "g1", "g2", "g3", "g1", "g2", "g3"])
    padded, members, labels = pad_groups(pw, group)
    assert padded.shape == (3, 3, 4)
    assert labels.tolist() == ["g1", "g2", "g3"]
    assert members.tolist() == [[1, 4, -1], [0, 2, 5], [3, 6, -1]]
    mandatory = np.array([False, True, False])
    pref = preferred_alternative(padded, do_nothing=~mandatory)
    for g, lab in enumerate(labels):
        rows = np.flatnonzero(group == lab)
        one = preferred_alternative(pw[rows], do_nothing=not mandatory[g])
        np.testing.assert_array_equal(pref.best[g], one.best)
        np.testing.assert_array_equal(pref.runner_up[g], one.runner_up)
        np.testing.assert_allclose(pref.margin[g], one.margin)


def test_missing_values_never_win():
    pw = np.array([[np.nan, 2.0], [1.0, np.nan]])
    pref = preferred_alternative(pw, do_nothing=False)
    assert pref.best.tolist() == [1, 0]
    assert pref.runner_up.tolist() == [NO_ALTERNATIVE, NO_ALTERNATIVE]
    allnan = preferred_alternative(np.full((2, 1), np.nan), do_nothing=False)
    assert allnan.best.tolist() == [NO_ALTERNATIVE]


def test_scalar_in_scalar_out():
    pref = preferred_alternative(np.array([3.0, 7.0, -1.0]))
    assert pref.best == 1 and pref.runner_up == 0 and pref.margin == 4.0
    assert isinstance(pref.best, int) and isinstance(pref.margin, float)


def test_choice_share():
    best = np.array([[0, 0, 1, DO_NOTHING], [1, 1, 1, 1]])
    np.testing.assert_allclose(choice_share(best, 2), [[0.5, 0.25, 0.25], [0.0, 1.0, 0.0]])
    w = np.array([1.0, 1.0, 2.0, 4.0])
    np.testing.assert_allclose(choice_share(best[0], 2, weights=w), [0.25, 0.25, 0.5])


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: preferred_alternative(np.float64(1.0)), "shape"),
        (lambda: preferred_alternative(np.zeros((0, 3))), "at least one"),
        (lambda: preferred_alternative(np.zeros((2, 2, 3)), do_nothing=[True, False, True]), "broadcast"),
        (lambda: preferred_alternative(np.array([[np.inf]])), "infinite"),
        (lambda: pad_groups(np.zeros((3, 2)), [1, 2]), r"shape \(3,\)"),
        (lambda: choice_share(np.array([0, 1]), 2, weights=[1.0]), r"shape \(2,\)"),
    ],
)
def test_bad_arguments_raise(call, match):
    with pytest.raises(ValueError, match=match):
        call()


@settings(max_examples=60, deadline=None)
@given(hnp.arrays(np.float64, hnp.array_shapes(min_dims=2, max_dims=3, min_side=1, max_side=5),
                  elements=st.floats(-1e6, 1e6, allow_nan=False)), st.booleans())
def test_best_is_maximum_and_margin_nonnegative(pw, optional):
    pref = preferred_alternative(pw, do_nothing=optional)
    cand = np.concatenate([pw, np.zeros(pw.shape[:-2] + (1, pw.shape[-1]))], axis=-2) if optional else pw
    best_val = np.where(pref.best == DO_NOTHING, 0.0,
                        np.take_along_axis(pw, np.maximum(pref.best, 0)[..., None, :], axis=-2)[..., 0, :])
    np.testing.assert_array_equal(best_val, cand.max(axis=-2))
    ok = ~np.isnan(pref.margin)
    assert np.all(pref.margin[ok] >= 0)
    assert np.all(pref.best != pref.runner_up)
