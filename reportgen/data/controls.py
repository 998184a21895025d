"""The sums a partial correlation needs: x, y and the control columns over their complete rows.

The partial correlation of x and y given controls z is the correlation of what is left of x and of y
once each is regressed on z (with an intercept). Everything the multivariate-normal model needs is the
(k + 2) x (k + 2) matrix of centred sums of squares and cross-products, so the cost does not grow with
the number of rows.

The residual sums are kept as a ``SufficientStats`` with ``n`` set to ``rows - k``: with flat priors on
the intercepts and the k slopes, the posterior of the partial correlation is the posterior of a simple
correlation from ``rows - k`` rows with the residual sums (integrating out the slopes takes one degree
of freedom each; this is the Bayesian counterpart of Fisher's (1924) result that a partial correlation
from n rows and k controls is distributed as a simple one from n - k rows). So the exact engine, the
exact reference of the sampler and every summary apply to it unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reportgen.data.sums import PERFECT_CORRELATION_COMPLEMENT, SufficientStats, centred, sufficient_stats
from reportgen.errors import DataError

__all__ = ["ControlData", "control_data"]

# a control this close to a linear function of the others (1 - R^2 below it) cannot be adjusted for
COLLINEAR_COMPLEMENT = 1e-10


@dataclass(frozen=True)
class ControlData:
    """x and y adjusted for the control columns, over the rows where x, y and every control are present."""

    controls: tuple[str, ...]
    n: int  # complete rows over x, y and the controls
    n_dropped: int  # rows left out because one of the values was missing
    stats: SufficientStats  # the simple sums of x and y over those rows
    # sample correlation matrix of (x, y, controls...) over those rows, in that order
    correlation: np.ndarray
    residual: SufficientStats  # sums of the residuals of x and y on the controls, with n = rows - k
    # the residuals themselves (x then y), for the checks of the adjusted model
    residual_x: np.ndarray
    residual_y: np.ndarray

    @property
    def partial_r(self) -> float:
        return self.residual.sample_r

    @property
    def k(self) -> int:
        return len(self.controls)


def _residuals(target: np.ndarray, design: np.ndarray) -> np.ndarray:
    """What is left of a centred column after least squares on the centred controls (QR, not the normal
    equations, so that nearly collinear controls keep their digits)."""
    coefficients, *_ = np.linalg.lstsq(design, target, rcond=None)
    return target - design @ coefficients


def control_data(x: np.ndarray, y: np.ndarray, controls: dict[str, np.ndarray], where: str,
                 pair_names: tuple[str, str] = ("x", "y")) -> ControlData:
    """The partial-correlation sums of one pair; ``where`` names the pair in messages (the file and the
    pair), ``pair_names`` its two columns, and ``controls`` maps each control column to its values (NaN
    where missing), row-aligned with x and y."""
    names = tuple(controls)
    k = len(names)
    columns = [controls[name] for name in names]
    complete = ~(np.isnan(x) | np.isnan(y))
    for values in columns:
        complete &= ~np.isnan(values)
    n = int(complete.sum())
    if n < 4 + k:
        raise DataError(f"{where}: only {n} rows have `{pair_names[0]}`, `{pair_names[1]}` and every control "
                        f"({', '.join(names)}); a partial correlation with {k} control{'s' if k != 1 else ''} "
                        f"needs at least {4 + k}: add rows, fill the gaps or adjust for fewer columns")
    x_kept, y_kept = x[complete], y[complete]
    deviations = []
    for name, values in zip(names, columns, strict=True):
        kept = values[complete]
        if np.ptp(kept) == 0:
            raise DataError(f"{where}: control `{name}` is constant ({kept[0]:g}) in the rows used, so there is "
                            "nothing to adjust for; remove it from controls")
        _, deviation = centred(kept)
        deviations.append(deviation / np.sqrt(deviation @ deviation))
    design = np.column_stack(deviations)
    for index, name in enumerate(names):
        others = np.delete(design, index, axis=1)
        left = _residuals(design[:, index], others) if others.shape[1] else design[:, index]
        if float(left @ left) < COLLINEAR_COMPLEMENT:
            raise DataError(f"{where}: control `{name}` is a linear function of the other controls (or constant "
                            "once they are accounted for), so it cannot be adjusted for separately; remove it "
                            "from controls")
    with np.errstate(all="ignore"):
        stats = sufficient_stats(x_kept, y_kept)
    _, dx = centred(x_kept)
    _, dy = centred(y_kept)
    residual_x = _residuals(dx, design)
    residual_y = _residuals(dy, design)
    sums = sufficient_stats(residual_x, residual_y)
    residual = SufficientStats(n=n - k, mean_x=0.0, mean_y=0.0, sxx=sums.sxx, syy=sums.syy, sxy=sums.sxy,
                               rss=sums.rss)
    for name, ss in ((pair_names[0], residual.sxx), (pair_names[1], residual.syy)):
        if not ss > 0:
            raise DataError(f"{where}: `{name}` is an exact linear function of the controls, so nothing is left to "
                            "correlate once they are accounted for; adjust for fewer columns")
    if residual.one_minus_abs_r <= PERFECT_CORRELATION_COMPLEMENT:
        raise DataError(f"{where}: once the controls are accounted for, x and y are perfectly correlated "
                        f"(partial r = {residual.sample_r:+.6f}), so there is nothing to estimate")
    matrix = np.column_stack([dx, dy, design])
    scale = np.sqrt(np.einsum("ij,ij->j", matrix, matrix))
    correlation = (matrix.T @ matrix) / np.outer(scale, scale)
    return ControlData(controls=names, n=n, n_dropped=int(complete.size - n), stats=stats,
                       correlation=correlation, residual=residual, residual_x=residual_x, residual_y=residual_y)
