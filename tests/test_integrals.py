"""Closed-form and quadrature wire integrals against scipy's adaptive quadrature (independent reference)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import dblquad, quad

from grounding.kernels.integrals import line_integral, segment_pair_integral

A = 0.006  # wire radius, m


def reference_pair(p0, p1, q0, q1, a=A):
    """∫∫ ds dt / √(|x(s) − y(t)|² + a²) by scipy.integrate.dblquad."""
    p0, p1, q0, q1 = map(np.asarray, (p0, p1, q0, q1))
    lp, lq = np.linalg.norm(p1 - p0), np.linalg.norm(q1 - q0)

    def f(t, s):
        x = p0 + (p1 - p0) * s
        y = q0 + (q1 - q0) * t
        return 1.0 / np.sqrt(np.sum((x - y) ** 2) + a * a)

    return dblquad(f, 0, 1, 0, 1, epsabs=1e-13, epsrel=1e-11)[0] * lp * lq


@pytest.mark.parametrize("q0,q1,tol", [
    ((0.3, 0.5, 0.2), (1.5, 0.5, 0.2), 1e-10),     # parallel, offset: closed form
    ((2.0, 0, 0), (3.0, 0, 0), 1e-10),             # collinear, apart
    ((1.0, 0, 0), (2.0, 0, 0), 1e-8),              # collinear, touching
    ((0, 0, 0), (0, 1, 0), 3e-4),                  # perpendicular, touching at a corner
    ((0, 0, 0), (0, 0, 1), 3e-4),                  # rod below a conductor end
    ((0.5, 0.3, 0.1), (0.2, 1.4, 0.9), 1e-6),     # oblique, apart
])
def test_pair_integral_against_dblquad(q0, q1, tol):
    p0, p1 = (0, 0, 0), (1, 0, 0)
    got = segment_pair_integral(np.array([p0], float), np.array([p1], float), np.array([q0], float),
                                np.array([q1], float), np.array([A]))[0]
    assert got == pytest.approx(reference_pair(p0, p1, q0, q1), rel=tol)


@pytest.mark.parametrize("q0,q1", [
    ((0.4, 1.2, 0.3), (0.9, 2.1, 0.8)),            # about one length apart: 12-node plain rule
    ((0.2, 4.5, 1.0), (1.1, 5.2, 0.2)),            # about four lengths apart: 6-node plain rule
    ((3.0, 9.0, 2.0), (3.5, 9.5, 2.9)),            # far
])
def test_pair_integral_of_apart_pairs_to_rounding(q0, q1):
    """Pairs a length or more apart take one plain Gauss–Legendre rule (integrals.FAR_RULES); against
    scipy.integrate.dblquad they agree to 1e-11 (the rules' error bound is about 1e-15)."""
    p0, p1 = (0, 0, 0), (1, 0, 0)
    got = segment_pair_integral(np.array([p0], float), np.array([p1], float), np.array([q0], float),
                                np.array([q1], float), np.array([A]))[0]
    assert got == pytest.approx(reference_pair(p0, p1, q0, q1), rel=1e-11)


def test_self_term_closed_form():
    """Self term of the reduced kernel: 2 [L asinh(L/a) − √(L² + a²) + a] (direct integration)."""
    L = 1.0
    got = segment_pair_integral(np.array([[0, 0, 0.]]), np.array([[L, 0, 0.]]), np.array([[0, 0, 0.]]),
                                np.array([[L, 0, 0.]]), np.array([A]))[0]
    assert got == pytest.approx(2 * (L * np.arcsinh(L / A) - np.sqrt(L * L + A * A) + A), rel=1e-12)


def test_line_integral_against_quad():
    p = np.array([0.3, 0.7, -0.4])
    a, b = np.array([0, 0, 0.]), np.array([2, 0.5, 0.3])
    ref = quad(lambda s: 1 / np.linalg.norm(p - (a + (b - a) * s)), 0, 1, epsabs=1e-14)[0] * np.linalg.norm(b - a)
    assert line_integral(p, a, b, 0.0) == pytest.approx(ref, rel=1e-12)


def test_pair_integral_symmetric():
    """The exact double integral is symmetric; swapping the roles of the two segments swaps which one
    takes the quadrature, so the difference measures the quadrature error (random pairs, some of
    which pass within a few wire radii of each other)."""
    rng = np.random.default_rng(3)
    p0, p1, q0, q1 = (rng.normal(size=(50, 3)) for _ in range(4))
    ab = segment_pair_integral(p0, p1, q0, q1, np.full(50, A))
    ba = segment_pair_integral(q0, q1, p0, p1, np.full(50, A))
    assert np.allclose(ab, ba, rtol=1e-4)
