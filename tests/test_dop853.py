"""The Dormand–Prince 8(5,3) tableau kept in deepwell/model/kernels/dop853_tableau.py.

Checks against outside facts: the Runge–Kutta order conditions (Butcher 2016, Numerical
Methods for Ordinary Differential Equations, 3rd ed., sect. 3.2: row sums c_i = Σ_j a_ij and
the quadrature conditions Σ b_i c_i^(k-1) = 1/k up to the method's order, here 8) and the
copy of the same coefficients shipped with SciPy (scipy.integrate, method DOP853).
"""

import math

import numpy as np
import pytest

from deepwell.model.kernels import dop853_tableau as tab


def test_row_sums_give_the_nodes():
    # Butcher (2016) sect. 3.2: c_i = sum_j a_ij for every stage (the simplifying condition).
    np.testing.assert_allclose(tab.A.sum(axis=1), tab.C, rtol=0, atol=4e-15)


def test_tableau_is_explicit():
    # Explicit method: A strictly lower triangular (common practice).
    assert np.all(np.triu(tab.A) == 0.0)


@pytest.mark.parametrize("k", range(1, 9))
def test_quadrature_order_conditions(k):
    # Butcher (2016) sect. 3.2: an order-8 method integrates t^(k-1) exactly for k <= 8.
    assert abs(np.sum(tab.B * tab.C ** (k - 1)) - 1.0 / k) < 2e-15


def test_tall_tree_order_conditions():
    # Butcher (2016) sect. 3.2, trees of the form [[...[tau]...]]: b^T A^(k-2) c = 1/k!.
    v = tab.C.copy()
    for k in range(2, 9):
        assert abs(tab.B @ v - 1.0 / math.factorial(k)) < 2e-15
        v = tab.A @ v


def test_agrees_with_scipys_copy():
    # The same published coefficients as SciPy's DOP853 (Hairer, Nørsett & Wanner 1993).
    dop = pytest.importorskip("scipy.integrate._ivp.dop853_coefficients")
    n = tab.N_STAGES
    assert dop.N_STAGES == n
    np.testing.assert_array_equal(tab.A, dop.A[:n, :n])
    np.testing.assert_array_equal(tab.B, dop.B)
    np.testing.assert_array_equal(tab.C, dop.C[:n])
