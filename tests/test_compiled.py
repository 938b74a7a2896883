"""Compiled engine loops against their NumPy formulations (reference: NumPy itself)."""
import numpy as np
import pytest

from ratescape.evaluate.compiled import weighted_exponential_sums
from ratescape.evaluate.kernel import PointEvaluator, LineClass
from ratescape.evaluate.timing import discount_exponents


@pytest.mark.parametrize("timing", ["end", "mid", "beginning"])
@pytest.mark.parametrize("periods_per_year", [1.0, 4.0, 12.0])
def test_geometric_sums_equal_the_exp_formulation(timing, periods_per_year):
    rng = np.random.default_rng(5)
    tau = discount_exponents(240, timing, periods_per_year)
    lines = rng.normal(size=(40, 240))
    x = rng.uniform(-0.6, 0.4, 40)
    want = np.einsum("pt,pt->p", lines, np.exp(np.multiply.outer(x, tau)))
    scale = np.einsum("pt,pt->p", np.abs(lines), np.exp(np.multiply.outer(x, tau)))
    got = weighted_exponential_sums(lines, x, tau)
    assert np.all(np.abs(got - want) <= 1e-13 * scale)


def test_uneven_exponents_use_exact_exponentials():
    tau = np.array([0.0, 0.3, 1.1, 2.9])
    lines = np.array([[1.0, 2.0, 3.0, 4.0]])
    want = lines[0] @ np.exp(-0.1 * tau)
    assert weighted_exponential_sums(lines, [-0.1], tau)[0] == pytest.approx(want, rel=1e-15)


def test_point_evaluator_per_project_rates_follow_the_definition():
    """PW_p = sum_c sum_t a_cpt ((1+e_c)(1+f_p))^tau_t / (1+i_p)^tau_t for real lines, 1/(1+i_p)^tau_t for
    nominal ones (the factor definitions of kernel.discount_tensor; common practice)."""
    rng = np.random.default_rng(6)
    classes = [LineClass("real", 0.0, "one"), LineClass("real", 0.02, "one"), LineClass("nominal", 0.0, "one")]
    A = rng.normal(size=(3, 3, 25, 31))
    tau = discount_exponents(31, "mid", 1.0)
    i = rng.uniform(0.0, 0.2, 25)
    f = rng.uniform(0.0, 0.1, 25)
    got = PointEvaluator(A, classes, tau)(i, f)
    total = A.sum(axis=0)
    want = np.zeros(25)
    for c, cls in enumerate(classes):
        growth = (1 + cls.escalation) * (1 + f) if cls.basis == "real" else np.ones(25)
        want += (total[c] * (growth[:, None] / (1 + i[:, None])) ** tau).sum(axis=1)
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-9)
