"""Stage 5: turn draws and exact posteriors into the numbers, verdicts and sentences a report shows.

``pair`` summarises one fit (sampler draws, the exact engine or the rank model), ``outcome`` composes a
pair's fits with its model checks, prior sensitivity and the choice of the leading model (``choice``),
and ``table`` lays the results out as the rows of results.csv.
"""

from reportgen.results.outcome import pair_outcome, sampled_models
from reportgen.results.pair import (
    FitSummary,
    ModelChoice,
    PairResult,
    ParameterSummary,
    RuleOutcome,
    RunResults,
    pair_result,
    pair_result_exact,
    pair_result_rank,
    run_results,
    summarise_parameter,
)
from reportgen.results.table import CSV_COLUMNS, results_rows

__all__ = [
    "CSV_COLUMNS", "FitSummary", "ModelChoice", "PairResult", "ParameterSummary", "RuleOutcome", "RunResults",
    "pair_outcome", "pair_result", "pair_result_exact", "pair_result_rank", "results_rows", "run_results",
    "sampled_models", "summarise_parameter",
]
