"""Tests of ratescape.decide.frontier (precise indifference frontier on a decision map).

Worth functions are built with a small local discounting helper (below), on
invented cash flows. The axes are x = nominal discount rate i and
y = general inflation f [fractions per year].
"""
import numpy as np
import numpy_financial as npf
import pytest
from scipy.optimize import brentq

from ratescape.decide.frontier import KIND_TRANSVERSAL, KIND_TRIPLE, indifference_frontier


def pw_lines(lines, i, f):
    """Present worth of cash-flow lines at nominal rate i and inflation f (end of period).

    lines: list of (amounts (T,), basis, escalation). Real lines:
    PW = sum A_t ((1+e)(1+f)/(1+i))^t; nominal lines: PW = sum A_t / (1+i)^t.
    """
    i = np.asarray(i, float)[..., None]
    f = np.asarray(f, float)[..., None]
    total = 0.0
    for amounts, basis, esc in lines:
        a = np.asarray(amounts, float)
        t = np.arange(a.size)
        g = (1 + esc) * (1 + f) / (1 + i) if basis == "real" else 1.0 / (1 + i)
        total = total + np.sum(a * g ** t, axis=-1)
    return total


def make_worth_at(alternatives):
    """worth_at(x (n,), y (n,)) -> (A, n); None stands for do nothing (worth 0)."""
    def worth_at(x, y):
        return np.vstack([np.zeros_like(np.asarray(x, float)) if alt is None else pw_lines(alt, x, y)
                          for alt in alternatives])
    return worth_at


def grid_values(worth_at, x, y):
    X, Y = np.meshgrid(x, y)
    return worth_at(X.ravel(), Y.ravel()).reshape(-1, y.size, x.size)


# Invented alternatives: A costs 1000 and returns 350 a year for 4 years,
# B costs 2000 and returns 650 a year; the incremental B - A is -1000, 300 x 4.
A_FLOWS = [-1000.0, 350, 350, 350, 350]
B_FLOWS = [-2000.0, 650, 650, 650, 650]
INCREMENT = np.subtract(B_FLOWS, A_FLOWS)
# common practice: the crossover (Fisher intersection) rate equals the IRR of
# the incremental cash flow; numpy_financial.irr as the reference library.
CROSSOVER = float(npf.irr(INCREMENT))


def check_points(fr, worth_at, floor=0.0, rtol=1e-9):
    """Tolerance property at every frontier point, and top-two validity."""
    W = worth_at(fr.x, fr.y)
    k = np.arange(len(fr))
    wa, wb = W[fr.alternative_a, k], W[fr.alternative_b, k]
    scale = np.maximum(np.abs(wa), np.abs(wb)) + floor + 1e-300
    assert np.all(np.abs(wa - wb) <= rtol * scale), np.max(np.abs(wa - wb) / scale)
    assert np.all(fr.converged)
    # no third alternative beats the indifferent pair
    assert np.all(W.max(axis=0) <= np.maximum(wa, wb) + rtol * (scale + np.abs(W).max(axis=0)))


def independent_roots(fr, worth_at, x, y):
    """Each point re-solved with scipy.optimize.brentq along x (y fixed), or along y."""
    hx, hy = np.diff(x).min(), np.diff(y).min()
    n_checked = 0
    for a, b, px, py in zip(fr.alternative_a, fr.alternative_b, fr.x, fr.y):
        def dx(t):
            return (lambda w: w[a, 0] - w[b, 0])(worth_at(np.array([t]), np.array([py])))

        def dy(t):
            return (lambda w: w[a, 0] - w[b, 0])(worth_at(np.array([px]), np.array([t])))

        for fun, c, h in ((dx, px, hx), (dy, py, hy)):
            lo, hi = c - 0.5 * h, c + 0.5 * h
            if fun(lo) * fun(hi) < 0:
                r = brentq(fun, lo, hi, xtol=1e-15, rtol=8.9e-16)
                assert abs(r - c) <= 1e-10 * max(1.0, abs(c)), (a, b, px, py, r)
                n_checked += 1
                break
    return n_checked


def test_vertical_crossover_at_incremental_irr():
    # nominal lines only: worth depends on i alone, so the frontier is the
    # vertical line i = IRR(B - A) across the whole inflation range
    alts = [[(A_FLOWS, "nominal", 0.0)], [(B_FLOWS, "nominal", 0.0)]]
    worth_at = make_worth_at(alts)
    x = np.linspace(0.02, 0.20, 19)
    y = np.linspace(0.0, 0.08, 9)
    fr = indifference_frontier(x, y, grid_values(worth_at, x, y), worth_at)
    assert fr.n_segments == 1
    assert set(fr.alternative_a) == {0} and set(fr.alternative_b) == {1}
    np.testing.assert_allclose(fr.x, CROSSOVER, rtol=0, atol=1e-12)
    # touches the border: one point on every grid row, bottom to top (or top to bottom)
    np.testing.assert_allclose(np.sort(fr.y), y, atol=1e-15)
    assert not np.any(np.isclose(fr.x[:, None], x[None, :], rtol=0, atol=1e-6))  # not a staircase
    check_points(fr, worth_at)  # worths ~ 150 here: plain relative scale
    assert independent_roots(fr, worth_at, x, y) == len(fr)


def test_real_lines_frontier_is_fisher_line():
    # real lines: worth depends on the real rate (1+i)/(1+f) - 1 alone, so the
    # frontier is (1 + i) = (1 + r*)(1 + f) with r* = IRR(B - A) (exact Fisher
    # relation; Fisher, The Theory of Interest, 1930) - a sloping straight line
    alts = [[(A_FLOWS, "real", 0.0)], [(B_FLOWS, "real", 0.0)]]
    worth_at = make_worth_at(alts)
    x = np.linspace(0.02, 0.25, 24)
    y = np.linspace(0.0, 0.10, 11)
    fr = indifference_frontier(x, y, None, worth_at, densify=3)
    np.testing.assert_allclose(fr.x, (1 + CROSSOVER) * (1 + fr.y) - 1, rtol=0, atol=1e-12)
    assert np.any(fr.kind == KIND_TRANSVERSAL)
    # ordered polyline: y strictly monotone along the segment
    dy = np.diff(fr.y)
    assert np.all(dy > 0) or np.all(dy < 0)
    assert fr.y.min() == pytest.approx(0.0, abs=1e-15) and fr.y.max() == pytest.approx(0.10, abs=1e-15)
    check_points(fr, worth_at)
    assert independent_roots(fr, worth_at, x, y) == len(fr)


def test_densifier_asks_worth_only_inside_the_grid_box():
    # a wide grid whose lower inflation edge sits at -99 %: outside the box the
    # worth model has no meaning (inflation at or below -100 %), as the run's
    # kernel refuses; the densifier's transversals that leave the box are dropped
    # without asking for their worth (a past crash with --allow-extreme-rates)
    alts = [[(A_FLOWS, "real", 0.0)], [(B_FLOWS, "real", 0.0)]]
    inner = make_worth_at(alts)
    x = np.linspace(0.0, 3.0, 31)
    y = np.linspace(-0.99, 0.5, 31)

    def worth_at(px, py):
        px, py = np.asarray(px, float), np.asarray(py, float)
        outside = (px < x[0] - 1e-12) | (px > x[-1] + 1e-12) | (py < y[0] - 1e-12) | (py > y[-1] + 1e-12)
        if np.any(outside):
            raise ValueError(f"worth asked outside the grid box at {px[outside][:3]}, {py[outside][:3]}")
        return inner(px, py)

    fr = indifference_frontier(x, y, None, worth_at, densify=2)
    assert len(fr) > 0 and np.any(fr.kind == KIND_TRANSVERSAL)
    # common practice (Fisher relation): on real lines the frontier is 1 + i = (1 + r*)(1 + f)
    np.testing.assert_allclose(fr.x, (1 + CROSSOVER) * (1 + fr.y) - 1, rtol=0, atol=1e-10)


def test_three_alternatives_meet_at_triple_point():
    # 0 = do nothing, 1 = nominal-money project (worth independent of f),
    # 2 = real-money project. PW1 = 0 at i = IRR1; PW2 = 0 at
    # (1+i) = (1+IRR2)(1+f); so all three are equal at i = IRR1,
    # f = (1+IRR1)/(1+IRR2) - 1 (closed form; IRRs by numpy_financial.irr).
    p1 = [-1000.0, 350, 350, 350, 350]
    p2 = [-1000.0, 300, 300, 300, 300]
    irr1, irr2 = float(npf.irr(p1)), float(npf.irr(p2))
    triple = np.array([irr1, (1 + irr1) / (1 + irr2) - 1])
    alts = [None, [(p1, "nominal", 0.0)], [(p2, "real", 0.0)]]
    worth_at = make_worth_at(alts)
    x = np.linspace(0.02, 0.25, 24)
    y = np.linspace(0.0, 0.12, 13)
    values = grid_values(worth_at, x, y)
    fr = indifference_frontier(x, y, values, worth_at, densify=1)
    pairs = {(int(a), int(b)) for a, b in zip(fr.alternative_a, fr.alternative_b)}
    assert pairs == {(0, 1), (0, 2), (1, 2)}
    tp = fr.kind == KIND_TRIPLE
    assert tp.sum() == 3  # one end of each of the three boundaries
    np.testing.assert_allclose(fr.x[tp], triple[0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(fr.y[tp], triple[1], rtol=0, atol=1e-9)
    # triple points are ends of their segments
    for s in np.unique(fr.segment[tp]):
        sel = fr.segment == s
        ends = {0, sel.sum() - 1}
        assert set(fr.point[sel & tp]) <= ends
    # the 0-1 boundary is the vertical line i = IRR1, the 0-2 boundary the Fisher line
    s01 = (fr.alternative_a == 0) & (fr.alternative_b == 1)
    np.testing.assert_allclose(fr.x[s01], irr1, atol=1e-12)
    s02 = (fr.alternative_a == 0) & (fr.alternative_b == 2)
    np.testing.assert_allclose(fr.x[s02], (1 + irr2) * (1 + fr.y[s02]) - 1, atol=1e-12)
    # scale floor: the documented 1e-3 x largest |worth| on the grid, since
    # every worth is 0 at the do-nothing boundaries
    check_points(fr, worth_at, floor=1e-3 * np.abs(values).max())
    assert independent_roots(fr, worth_at, x, y) >= len(fr) - 3


def test_no_frontier_when_one_alternative_dominates():
    a = [(A_FLOWS, "real", 0.0)]
    b = [(np.add(A_FLOWS, [100.0, 0, 0, 0, 0]), "real", 0.0)]  # same flows, 100 cheaper
    worth_at = make_worth_at([a, b])
    x = np.linspace(0.0, 0.2, 11)
    y = np.linspace(0.0, 0.1, 6)
    fr = indifference_frontier(x, y, None, worth_at)
    assert len(fr) == 0 and fr.n_segments == 0 and fr.polylines() == []
    # a single alternative has no frontier either
    assert len(indifference_frontier(x, y, grid_values(worth_at, x, y)[:1], worth_at)) == 0


def test_frontier_through_grid_nodes():
    # worth_1 = x + y - 1 against do nothing: the frontier x + y = 1 passes
    # exactly through the nodes of a grid in steps of 1/4 (exact in binary)
    x = np.linspace(0.0, 1.0, 5)
    y = np.linspace(0.0, 1.0, 5)

    def worth_at(xp, yp):
        return np.vstack([np.zeros_like(xp), xp + yp - 1.0])

    fr = indifference_frontier(x, y, None, worth_at)
    assert fr.n_segments == 1
    pts = sorted(zip(fr.x.tolist(), fr.y.tolist()))
    assert pts == [(0.0, 1.0), (0.25, 0.75), (0.5, 0.5), (0.75, 0.25), (1.0, 0.0)]
    assert np.all(fr.residual == 0.0)


def test_closed_loop_inside_grid():
    x = np.linspace(0.0, 1.0, 21)
    y = np.linspace(0.0, 1.0, 17)

    def worth_at(xp, yp):
        return np.vstack([np.full_like(xp, 1.0), 1.1 - (xp - 0.5) ** 2 - (yp - 0.5) ** 2])

    fr = indifference_frontier(x, y, None, worth_at, densify=1)
    (a, b, xy), = fr.polylines()
    np.testing.assert_array_equal(xy[0], xy[-1])  # a closed loop repeats its first point
    np.testing.assert_allclose(np.hypot(xy[:, 0] - 0.5, xy[:, 1] - 0.5), np.sqrt(0.1), rtol=1e-12)
    check_points(fr, worth_at)


def test_as_columns_and_consistent_inputs():
    alts = [[(A_FLOWS, "nominal", 0.0)], [(B_FLOWS, "real", 0.02)]]
    worth_at = make_worth_at(alts)
    x = np.linspace(0.02, 0.3, 15)
    y = np.linspace(0.0, 0.1, 6)
    fr1 = indifference_frontier(x, y, None, worth_at)
    fr2 = indifference_frontier(x, y, grid_values(worth_at, x, y), worth_at)
    assert len(fr1) > 0
    np.testing.assert_array_equal(fr1.x, fr2.x)
    cols = fr1.as_columns()
    assert list(cols)[:6] == ["alternative_a", "alternative_b", "segment", "point", "x", "y"]
    assert all(v.shape == (len(fr1),) for v in cols.values())
    check_points(fr1, worth_at)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        (dict(x=[0.1, 0.0, 0.2]), "increasing"),
        (dict(y=[0.0]), r"shape \(ny,\)"),
        (dict(values=np.zeros((2, 3, 3))), r"shape \(A, ny, nx\) = \(A, 4, 3\)"),
        (dict(worth_at=lambda xp, yp: np.zeros((3, xp.size))), r"shape \(A, n\) = \(2"),
        (dict(densify=-1), "densify"),
        (dict(worth_at=None), "callable"),
    ],
)
def test_bad_arguments_raise(kwargs, match):
    def worth_at(xp, yp):
        return np.vstack([xp - 0.05, np.zeros_like(xp)])

    args = dict(x=np.array([0.0, 0.1, 0.2]), y=np.linspace(0, 0.1, 4), values=None, worth_at=worth_at)
    X, Y = np.meshgrid(args["x"], args["y"])
    args["values"] = np.stack([X - 0.05, np.zeros_like(X)])
    args.update(kwargs)
    densify = args.pop("densify", 0)
    with pytest.raises(ValueError, match=match):
        indifference_frontier(args["x"], args["y"], args["values"], args["worth_at"], densify=densify)


def test_grid_values_with_rounding_noise():
    # the engine's grid (a matrix product) and worth_at may differ in the last
    # bits; the frontier still comes from the exact worth_at
    alts = [None, [(A_FLOWS, "nominal", 0.0)], [(B_FLOWS, "real", 0.0)]]
    worth_at = make_worth_at(alts)
    x = np.linspace(0.0, 0.3, 31)
    y = np.linspace(0.0, 0.1, 11)
    values = grid_values(worth_at, x, y)
    noisy = values * (1 + 1e-13 * np.random.default_rng(3).standard_normal(values.shape))
    fr = indifference_frontier(x, y, noisy, worth_at)
    ref = indifference_frontier(x, y, values, worth_at)
    assert len(fr) == len(ref) > 0
    np.testing.assert_allclose(fr.x, ref.x, atol=1e-12)
    check_points(fr, worth_at, floor=1e-3 * np.abs(values).max())


def test_bracketed_roots_agree_with_scipy_find_root():
    """The vectorised Chandrupatla solver behind the frontier against SciPy's implementation of the
    same method (scipy.optimize.elementwise.find_root, the reference library) on bracketed roots of
    smooth, steep, flat-ended and polynomial functions; every root converged and f(t) near 0."""
    from scipy.optimize import elementwise

    from ratescape.decide.frontier import _bracketed_roots

    rng = np.random.default_rng(11)
    n = 400
    shift = rng.uniform(0.001, 0.999, n)
    kind = rng.integers(0, 4, n)

    def f(t, s, k):
        return np.select([k == 0, k == 1, k == 2, k == 3],
                         [np.tanh(40 * (t - s)),                      # steep
                          (t - s) ** 3,                               # flat at the root
                          np.exp(t) - np.exp(s),                      # smooth
                          (t - s) * (t + 2.0) * (1.5 - t) - 1e-12])   # cubic, root near s
    f0, f1 = f(np.zeros(n), shift, kind), f(np.ones(n), shift, kind)
    t, ok = _bracketed_roots(f, f0, f1, (shift, kind))
    ref = elementwise.find_root(f, (np.zeros(n), np.ones(n)), args=(shift, kind))
    assert ok.all() and ref.success.all()
    np.testing.assert_allclose(t, ref.x, rtol=0, atol=1e-12)
    assert np.all(np.abs(f(t, shift, kind)) <= 1e-10)
    # an exact zero at an end, and elements whose function is not finite, are reported
    t2, ok2 = _bracketed_roots(lambda tt, s: np.where(s > 0, np.nan, tt - 0.25), np.array([-0.25, -0.25]),
                               np.array([0.75, 0.75]), (np.array([0.0, 1.0]),))
    assert ok2.tolist() == [True, False] and t2[0] == 0.25 and np.isnan(t2[1])
