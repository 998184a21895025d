"""Every data-driven check of one pair, composed, with its warnings as short codes and plain sentences.

The checks judge the bivariate-normal model, the one every other number is
compared with: which single rows move rho (influence), which rows are further
out than the model allows and whether the shape is normal (Mahalanobis
distances, Mardia's tests), whether a column is too coarse for it
(discreteness), and whether data replicated from the fit look like the data
(posterior predictive check). ``flags_normal`` says whether a careful analyst
would want a robust fit to lead.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from reportgen.checks.influence import Influence, leave_one_out
from reportgen.checks.ppc import PredictiveCheck, predictive_check
from reportgen.checks.shape import Discreteness, Shape, discreteness, shape_checks
from reportgen.spec import Checks, Rule

# Codes written to results.csv's model_warnings column; scripts rely on them.
INFLUENTIAL_ROWS = "influential_rows"
OUTLIERS = "outliers"
NOT_NORMAL = "not_normal"
DISCRETE_X = "discrete_x"
DISCRETE_Y = "discrete_y"
PPC_R = "ppc_r"
PPC_SKEW = "ppc_skew"
HEAVY_TAILS = "heavy_tails"
PRIOR_SENSITIVE = "prior_sensitive"
ROBUST_DIFFERS = "robust_differs"
# the codes that make a robust fit lead under model = "auto"; influential rows count only when one row
# moves the median by more than its posterior SD as well (``strong_influence``): at n = 30 a shift of 0.1
# is ordinary for clean bivariate-normal data (measured: 45% of simulated clean pairs had such a row)
FLAGS_NORMAL = frozenset({OUTLIERS, NOT_NORMAL, PPC_SKEW, HEAVY_TAILS})
MAX_ROWS_NAMED = 8


@dataclass(frozen=True)
class ModelWarning:
    code: str
    sentence: str


@dataclass(frozen=True)
class ModelChecks:
    influence: Influence
    shape: Shape
    discrete_x: Discreteness
    discrete_y: Discreteness
    predictive: PredictiveCheck
    warnings: tuple[ModelWarning, ...]
    # some row alone moves the median of rho by more than the threshold and more than the posterior SD
    strong_influence: bool = False

    @property
    def codes(self) -> tuple[str, ...]:
        return tuple(w.code for w in self.warnings)

    @property
    def flags_normal(self) -> bool:
        return self.strong_influence or any(code in FLAGS_NORMAL for code in self.codes)

    @property
    def flagging_codes(self) -> tuple[str, ...]:
        """The codes that make a robust fit lead, in the order found."""
        return tuple(code for code in self.codes
                     if code in FLAGS_NORMAL or (code == INFLUENTIAL_ROWS and self.strong_influence))

    def with_warning(self, warning: ModelWarning) -> ModelChecks:
        return dataclasses.replace(self, warnings=(*self.warnings, warning))


def rows_text(rows: Sequence[int]) -> str:
    """"row 14", "rows 14 and 37", "rows 3, 8, 14 and 6 more"."""
    rows = [int(r) for r in rows]
    shown = rows[:MAX_ROWS_NAMED]
    more = len(rows) - len(shown)
    if len(shown) == 1 and not more:
        return f"row {shown[0]}"
    if not more:
        return "rows " + ", ".join(str(r) for r in shown[:-1]) + f" and {shown[-1]}"
    return "rows " + ", ".join(str(r) for r in shown) + f" and {more} more"


def _p_text(p: float, resolution: float = 1e-4) -> str:
    """A p-value; below ``resolution`` (2 / replicates for a simulated one) only the bound is shown."""
    if p < resolution:
        return f"p < {resolution:.2g}"
    return f"p = {p:.4f}" if p < 0.01 else f"p = {p:.3f}"


def _influence_warning(influence: Influence, threshold: float) -> ModelWarning | None:
    if not influence.applies or not influence.flagged_rows:
        return None
    moved = [int(p) for p in influence.flagged_positions]
    shift = float(influence.shifts[moved[0]])
    count = len(influence.flagged_rows)
    how = (f"row {influence.flagged_rows[0]} alone by {shift:+.2f}" if np.isfinite(shift) else
           f"without row {influence.flagged_rows[0]} a column would be constant")
    flips = sorted({name for _, name in influence.flips})
    flip_text = ""
    if flips:
        flip_rows = rows_text(sorted({row for row, _ in influence.flips}))
        flip_text = (f" Leaving out {flip_rows} alone changes the verdict on "
                     + ", ".join(f"\u201c{name}\u201d" for name in flips) + ".")
    verb = "moves" if count == 1 else "each move"
    return ModelWarning(INFLUENTIAL_ROWS, (
        f"Leaving out {rows_text(influence.flagged_rows)} of the input file {verb} the median of \u03c1 by "
        f"more than {threshold:g} or changes a verdict ({how}): the normal model's "
        f"conclusion rests on {'this row' if count == 1 else 'these rows'}; check {'it' if count == 1 else 'them'} "
        f"before relying on that fit.{flip_text}").replace("-", "\u2212"))


def _outlier_warning(shape: Shape, level: float) -> ModelWarning | None:
    if not shape.outlier_rows:
        return None
    count = len(shape.outlier_rows)
    return ModelWarning(OUTLIERS, (
        f"{rows_text(shape.outlier_rows).capitalize()} {'lies' if count == 1 else 'lie'} further from the centre "
        f"of the data than a bivariate normal distribution allows (Mahalanobis distance beyond the "
        f"{level:g} family-wise limit); the distance plot shows {'it' if count == 1 else 'them'}."))


def _normality_warning(shape: Shape, level: float) -> ModelWarning | None:
    if not shape.normality_p < level:
        return None
    return ModelWarning(NOT_NORMAL, (
        f"Mardia's tests reject a bivariate normal shape (skewness {_p_text(shape.skewness_p)}, "
        f"kurtosis {_p_text(shape.kurtosis_p)}); with many rows even a small departure is detected, so read "
        "this with the scatter plot."))


def _discrete_warning(code: str, label: str, found: Discreteness, rank_model: bool) -> ModelWarning | None:
    if not found.discrete:
        return None
    advice = ("the rank model used here suits such data" if rank_model
              else "the rank model (model = \"rank\") suits such data")
    return ModelWarning(code, (
        f"{label} takes only {found.distinct} distinct value{'' if found.distinct == 1 else 's'} "
        f"({found.tied_share:.0%} of all pairs of rows tie): Pearson's correlation of "
        f"coarse or ordinal values is hard to read, and {advice}."))


def _predictive_warnings(check: PredictiveCheck, level: float, x_label: str, y_label: str) -> list[ModelWarning]:
    found = []
    if check.p_r < level:
        found.append(ModelWarning(PPC_R, (
            f"Data replicated from the fitted normal model rarely show a sample correlation like the observed "
            f"one (posterior predictive {_p_text(check.p_r, 2.0 / check.replicates)}).")))
    skewed = [(label, p, g) for label, p, g in ((x_label, check.p_skew_x, check.observed_skew_x),
                                                (y_label, check.p_skew_y, check.observed_skew_y)) if p < level]
    if skewed:
        parts = [f"{label} (skewness {g:.2f}, posterior predictive {_p_text(p, 2.0 / check.replicates)})"
                 .replace("-", "\u2212")
                 for label, p, g in skewed]
        found.append(ModelWarning(PPC_SKEW, (
            "The fitted normal model does not reproduce the lopsided spread of "
            + " and ".join(parts) + ": skewed margins, where the model assumes symmetric ones.")))
    return found


def model_checks(
    x: np.ndarray, y: np.ndarray, row_numbers: np.ndarray, *, x_label: str, y_label: str,
    rho_prior: tuple[float, float], rules: Sequence[Rule], settings: Checks, normal_rho_draws: np.ndarray,
    seed: int, rank_model: bool = False,
) -> ModelChecks:
    """Run every check of the normal model on one pair's complete rows."""
    influence = leave_one_out(x, y, row_numbers, rho_prior[0], rho_prior[1], rules,
                              threshold=settings.influence_shift)
    shape = shape_checks(x, y, row_numbers, level=settings.outlier_level)
    kinds = {"max_distinct": settings.discrete_max_distinct, "max_tied_share": settings.discrete_tied_share}
    discrete_x, discrete_y = discreteness(x, **kinds), discreteness(y, **kinds)
    predictive = predictive_check(normal_rho_draws, x, y, seed)
    found = [
        _influence_warning(influence, settings.influence_shift),
        _outlier_warning(shape, settings.outlier_level),
        _normality_warning(shape, settings.normality_level),
        _discrete_warning(DISCRETE_X, x_label, discrete_x, rank_model),
        _discrete_warning(DISCRETE_Y, y_label, discrete_y, rank_model),
        *_predictive_warnings(predictive, settings.predictive_level, x_label, y_label),
    ]
    return ModelChecks(influence=influence, shape=shape, discrete_x=discrete_x, discrete_y=discrete_y,
                       predictive=predictive, warnings=tuple(w for w in found if w is not None),
                       strong_influence=_strong_influence(influence, settings.influence_shift))


def _strong_influence(influence: Influence, threshold: float) -> bool:
    """Does one row alone move the median of rho by more than the threshold and the posterior SD?"""
    if not influence.applies or not np.isfinite(influence.max_shift):
        return bool(influence.applies and influence.flagged_rows and not np.isfinite(influence.max_shift))
    return bool(influence.max_shift > max(threshold, influence.sd_full))
