"""The partial correlation through the results stage: the exact engine's numbers, the row of results.csv and
the sentence that says what the adjustment changed."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from reportgen import exact
from reportgen.data import load_pairs, load_table
from reportgen.results.adjustment import change_sentence
from reportgen.results.outcome import pair_outcome
from reportgen.results.pair import run_results
from reportgen.results.rho import RhoSummary
from reportgen.results.table import results_rows
from reportgen.runs.verify import row_key
from reportgen.spec import load_spec
from tests.test_groups import spec_file

ADJUSTED = """
engine = "exact"

[[pairs]]
x = "algae"
y = "midges"
controls = ["temperature"]

[[rules]]
name = "any_link"
statement = "above"
threshold = 0.0
"""


def confounded_frame(n: int = 150, seed: int = 4) -> pd.DataFrame:
    """Both columns follow the temperature and nothing else: a strong raw correlation, none once it is allowed for."""
    rng = np.random.default_rng(seed)
    temperature = rng.normal(12, 4, n)
    frame = pd.DataFrame({"temperature": temperature, "algae": 2 * temperature + rng.normal(0, 2, n),
                          "midges": 10 * temperature + rng.normal(0, 10, n)})
    frame.loc[3, "temperature"] = np.nan  # one row without the control: left out of the partial fit only
    return frame


def _result(tmp_path):  # type: ignore[no-untyped-def]
    confounded_frame().to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(spec_file(tmp_path, ADJUSTED))
    pair = load_pairs(spec, load_table(spec))[0]
    return spec, pair, pair_outcome(spec, pair, {}, {})


def test_the_exact_engine_gives_the_partial_correlation_and_its_row(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec, pair, result = _result(tmp_path)
    adjustment = result.adjustment
    assert adjustment is not None and adjustment.engine == "exact"
    frame = confounded_frame().dropna()
    design = sm.add_constant(frame.temperature)
    # reference: the correlation of statsmodels OLS residuals is the partial correlation (common practice)
    residual_r = np.corrcoef(sm.OLS(frame.algae, design).fit().resid, sm.OLS(frame.midges, design).fit().resid)[0, 1]
    assert adjustment.partial_r == pytest.approx(residual_r, abs=1e-10)
    assert adjustment.n == len(frame) and adjustment.n_dropped == 1
    # reference: Jeffreys' exact posterior with n - k rows (derived in reportgen.data.controls), and the t test of a
    # partial correlation on n - 2 - k degrees of freedom (common practice; scipy's t distribution)
    posterior = exact.exact_posterior(len(frame) - 1, residual_r)
    assert adjustment.partial.median == pytest.approx(float(posterior.median), abs=1e-9)
    t = residual_r * np.sqrt((len(frame) - 3) / (1 - residual_r ** 2))
    assert adjustment.reference.p_value == pytest.approx(2 * stats.t.sf(abs(t), len(frame) - 3), rel=1e-9)
    header, rows = results_rows(run_results(spec, (result,)))
    table = pd.DataFrame(rows, columns=header)
    assert list(table.controls) == ["", "temperature"]
    partial_row = table.iloc[1]
    assert partial_row.model == "partial" and float(partial_row.sample_r) == pytest.approx(residual_r, abs=1e-12)
    assert float(partial_row.p_positive) == pytest.approx(float(posterior.prob_above(0.0)), abs=1e-9)
    assert float(partial_row.p_any_link_mcse) == 0.0  # by quadrature: no Monte Carlo error
    assert int(partial_row.n) == len(frame)
    assert row_key(dict(partial_row.astype(str))) == "algae vs midges [given temperature]"
    assert "no longer clearly different from zero" in adjustment.sentence


def _summary(median: float, lower: float, upper: float) -> RhoSummary:
    return RhoSummary(median=median, lower=lower, upper=upper, mean=median, sd=0.1, p_positive=0.5, p_rope=0.0,
                      interval_kind="central", rules=())


@pytest.mark.parametrize(("simple", "partial", "words"), [
    ((0.9, 0.85, 0.93), (-0.03, -0.25, 0.18), "no longer clearly different from zero"),
    ((0.6, 0.5, 0.7), (-0.4, -0.5, -0.3), "reverses"),
    ((0.6, 0.5, 0.7), (0.3, 0.2, 0.4), "weakens"),
    ((0.3, 0.2, 0.4), (0.6, 0.5, 0.7), "strengthens"),
    ((0.5, 0.4, 0.6), (0.45, 0.35, 0.55), "changes the correlation little"),
])
def test_the_change_is_put_in_words(simple, partial, words: str) -> None:  # type: ignore[no-untyped-def]
    sentence = change_sentence(_summary(*simple), _summary(*partial), "temperature")
    assert words in sentence and "temperature" in sentence


def test_a_failed_partial_fit_falls_back_to_exact_and_marks_the_pair(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec, pair, _ = _result(tmp_path)
    result = pair_outcome(spec, pair, {}, {"partial": "the sampler stopped"})
    assert result.adjustment.engine == "exact" and result.adjustment.status == "fail"
    assert result.status == "warn"
    assert any("partial correlation" in reason for reason in result.diagnosis.reasons)
