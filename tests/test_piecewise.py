"""Tests for reportgen.piecewise against scipy.interpolate (CubicHermiteSpline, CubicSpline), whose
coefficient layout and evaluation GridCubic follows."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import interpolate

from reportgen.piecewise import GridCubic


@pytest.fixture
def curve() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(3)
    knots = np.linspace(-2.0, 3.0, 61)
    return knots, np.cumsum(rng.uniform(0.0, 1.0, knots.size)), rng.uniform(0.0, 2.0, knots.size)


def test_hermite_matches_scipy_inside_beyond_and_at_the_knots(curve: tuple[np.ndarray, ...]) -> None:
    knots, values, slopes = curve
    ours = GridCubic.hermite(knots, values, slopes)
    theirs = interpolate.CubicHermiteSpline(knots, values, slopes)
    points = np.concatenate([np.random.default_rng(4).uniform(-2.5, 3.5, 500), knots])
    np.testing.assert_allclose(ours.c, theirs.c, rtol=1e-14, atol=0)
    np.testing.assert_allclose(ours(points), theirs(points), rtol=1e-14, atol=1e-14)
    np.testing.assert_allclose(ours.slope(points), theirs(points, 1), rtol=1e-12, atol=1e-12)
    assert np.isnan(ours(np.array([np.nan]))[0])


def test_one_point_in_floats_equals_the_array_evaluation(curve: tuple[np.ndarray, ...]) -> None:
    knots, values, slopes = curve
    ours = GridCubic.hermite(knots, values, slopes)
    for x in (-2.7, -2.0, 0.123, 1.5, 3.0, 3.9):
        value, slope = ours.at(x)
        assert value == ours(np.array([x]))[0]
        assert slope == ours.slope(np.array([x]))[0]


def test_stacked_curves_keep_their_own_pieces(curve: tuple[np.ndarray, ...]) -> None:
    """Two curves built together are each the curve built alone; piece i of the second is piece
    len(knots) - 1 + i of the stack."""
    knots, values, slopes = curve
    falling = values[::-1].copy()
    stack = GridCubic.hermite(knots, np.stack((values, falling)), np.stack((slopes, -slopes[::-1])))
    alone = GridCubic.hermite(knots, falling, -slopes[::-1])
    np.testing.assert_array_equal(stack.curve(1).c, alone.c)
    points = np.linspace(-2.0, 3.0, 97)
    pieces = alone.piece(points)
    np.testing.assert_array_equal(stack.on_piece(pieces + knots.size - 1, points), alone(points))


def test_coefficients_of_a_cubic_spline_evaluate_as_scipy_does() -> None:
    knots = np.linspace(0.0, 1.0, 41)
    values = np.sin(5.0 * knots)
    spline = interpolate.CubicSpline(knots, values)
    ours = GridCubic.from_coefficients(knots, spline.c)
    points = np.linspace(-0.1, 1.1, 301)
    np.testing.assert_allclose(ours(points), spline(points), rtol=1e-14, atol=1e-15)
    np.testing.assert_allclose(ours.slope(points), spline(points, 1), rtol=1e-12, atol=1e-12)
