"""Piecewise cubics on a fixed grid of knots, for the posteriors computed by quadrature.

The exact posterior's summaries (quantiles, intervals, tail probabilities) evaluate its cumulative and
log-density curves a handful of points at a time, hundreds of times per pair. scipy's ``PPoly`` spends most
of such a call on checking and converting its input; ``GridCubic`` stores the same coefficients in the same
layout (``c[0] s^3 + c[1] s^2 + c[2] s + c[3]``, ``s`` the distance from the left knot of the point's
piece, the end pieces extended beyond the knots) and evaluates them with the same operations in the same
order, so its values are the ones ``PPoly`` gives.

Pieces are addressed by index, so the pieces of several curves on one grid can be stacked into one
``GridCubic`` and a root searched for on all of them at once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["GridCubic"]


@dataclass(frozen=True, eq=False)
class GridCubic:
    """Cubic pieces: piece ``i`` starts at ``left[i]`` with coefficients ``c[:, i]`` (as ``PPoly.c``).

    ``knots`` are the increasing knots of one curve, ``left`` is ``knots[:-1]`` (or several copies of it,
    for stacked curves).
    """

    knots: np.ndarray
    left: np.ndarray
    c: np.ndarray

    @classmethod
    def from_coefficients(cls, knots: np.ndarray, c: np.ndarray) -> GridCubic:
        """One curve through ``knots`` with the pieces ``c`` of shape (4, len(knots) - 1)."""
        return cls(knots=knots, left=knots[:-1], c=c)

    @classmethod
    def hermite(cls, knots: np.ndarray, values: np.ndarray, slopes: np.ndarray) -> GridCubic:
        """The cubic Hermite interpolant of ``values`` with derivatives ``slopes`` at ``knots``.

        On each piece the cubic is fixed by the two end values and the two end slopes; its
        coefficients are formed as scipy's ``CubicHermiteSpline`` forms them. ``values`` and ``slopes``
        may hold several curves as rows (shape (curves, len(knots))): their pieces are then stacked,
        curve after curve.
        """
        width = np.diff(knots)
        secant = np.diff(values) / width
        excess = (slopes[..., :-1] + slopes[..., 1:] - 2.0 * secant) / width
        c = np.empty((4, *secant.shape))
        c[0] = excess / width
        c[1] = (secant - slopes[..., :-1]) / width - excess
        c[2] = slopes[..., :-1]
        c[3] = values[..., :-1]
        curves = int(np.prod(secant.shape[:-1], dtype=int))
        left = knots[:-1] if curves == 1 else np.tile(knots[:-1], curves)
        return cls(knots=knots, left=left, c=c.reshape(4, -1))

    def curve(self, number: int) -> GridCubic:
        """The pieces of one of several stacked curves (a view, not a copy)."""
        count = self.knots.size - 1
        return GridCubic.from_coefficients(self.knots, self.c[:, number * count:(number + 1) * count])

    def piece(self, x: np.ndarray) -> np.ndarray:
        """Index of the piece of the (first) curve holding each ``x``: ``knots[i] <= x < knots[i + 1]``,
        the end pieces beyond the knots."""
        return np.searchsorted(self.knots[1:-1], x, side="right")

    def on_piece(self, index: np.ndarray, x: np.ndarray) -> np.ndarray:
        """Piece ``index``'s cubic at ``x`` (which may lie outside that piece)."""
        c = self.c[:, index]
        s = x - self.left[index]
        s2 = s * s
        return c[3] + c[2] * s + c[1] * s2 + c[0] * (s2 * s)

    def value_and_slope_on_piece(self, index: np.ndarray, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Piece ``index``'s cubic and its derivative at ``x``."""
        c = self.c[:, index]
        s = x - self.left[index]
        s2 = s * s
        return c[3] + c[2] * s + c[1] * s2 + c[0] * (s2 * s), c[2] + c[1] * s * 2.0 + c[0] * s2 * 3.0

    def at(self, x: float) -> tuple[float, float]:
        """Value and derivative at one point, in Python floats (the same operations as ``on_piece``)."""
        return self.at_piece(int(np.searchsorted(self.knots[1:-1], x, side="right")), x)

    def at_piece(self, index: int, x: float) -> tuple[float, float]:
        """Piece ``index``'s cubic and its derivative at one point, in Python floats."""
        c0, c1, c2, c3 = self.c[:, index].tolist()
        s = x - float(self.left[index])
        s2 = s * s
        return c3 + c2 * s + c1 * s2 + c0 * (s2 * s), c2 + c1 * s * 2.0 + c0 * s2 * 3.0

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """Values at ``x`` (an array; NaN gives NaN)."""
        return self.on_piece(self.piece(x), x)

    def slope(self, x: np.ndarray) -> np.ndarray:
        """Derivatives at ``x``."""
        return self.value_and_slope_on_piece(self.piece(x), x)[1]
