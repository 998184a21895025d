"""Groups: the spec's keys, the per-group sums, Simpson's warning, the group comparisons and results.csv's rows."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from scipy import integrate

from reportgen import exact
from reportgen.data import load_pairs, load_table
from reportgen.errors import DataError, SpecError
from reportgen.results.groups import group_analysis, within_stats
from reportgen.results.table import results_rows
from reportgen.spec import load_spec
from tests.conftest import write_spec

WITHIN_RHO = -0.6
SITE_MEANS = (0.0, 1.5, 3.0, 4.5, 6.0)


def paradox_frame(seed: int = 3, n_per_site: int = 60) -> pd.DataFrame:
    """Within every site x and y fall together (rho = -0.6); the sites' means rise together, so that over all rows
    they rise together: Simpson's paradox, planted."""
    rng = np.random.default_rng(seed)
    cov = np.array([[1.0, WITHIN_RHO], [WITHIN_RHO, 1.0]])
    parts = []
    for index, centre in enumerate(SITE_MEANS):
        values = rng.multivariate_normal([centre, centre], cov, size=n_per_site)
        parts.append(pd.DataFrame({"site": f"S{index + 1}", "x": values[:, 0], "y": values[:, 1]}))
    small = rng.multivariate_normal([2.0, 2.0], cov, size=3)  # too few rows: listed and left out
    parts.append(pd.DataFrame({"site": "tiny", "x": small[:, 0], "y": small[:, 1]}))
    return pd.concat(parts, ignore_index=True)


GROUPED = """
engine = "exact"
group_by = "site"

[[pairs]]
x = "x"
y = "y"
"""


def spec_file(folder, body: str):  # type: ignore[no-untyped-def]
    """A spec whose ``body`` may start with top-level keys (TOML needs them before the first table)."""
    top, _, tables = ("\n" + body).partition("\n[")
    path = write_spec(folder, "[" + tables if tables else "")
    path.write_text(top + "\n" + path.read_text(encoding="utf-8"), encoding="utf-8")
    return path


def _grouped_pair(tmp_path, frame: pd.DataFrame, body: str = GROUPED):  # type: ignore[no-untyped-def]
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(spec_file(tmp_path, body))
    return spec, load_pairs(spec, load_table(spec))[0]


def test_groups_are_split_and_the_small_one_is_listed(tmp_path) -> None:  # type: ignore[no-untyped-def]
    spec, pair = _grouped_pair(tmp_path, paradox_frame())
    assert pair.groups is not None
    assert pair.groups.labels == ("S1", "S2", "S3", "S4", "S5")
    assert [(g.label, g.n) for g in pair.groups.left_out] == [("tiny", 3)]
    frame = paradox_frame()
    for group in pair.groups.groups:  # reference: numpy's corrcoef of the group's own rows
        rows = frame[frame.site == group.label]
        assert group.stats.sample_r == pytest.approx(np.corrcoef(rows.x, rows.y)[0, 1], abs=1e-12)


def test_within_group_correlation_is_the_partial_correlation_given_the_groups(tmp_path) -> None:  # type: ignore[no-untyped-def]
    # reference: statsmodels OLS with the group as a categorical regressor; the correlation of the residuals is
    # the within-group (pooled) correlation, and its degrees of freedom are n - G (common practice, ANCOVA)
    spec, pair = _grouped_pair(tmp_path, paradox_frame())
    within = within_stats(tuple(g.stats for g in pair.groups.groups))
    frame = paradox_frame()
    used = frame[frame.site != "tiny"]
    rx = smf.ols("x ~ C(site)", data=used).fit().resid
    ry = smf.ols("y ~ C(site)", data=used).fit().resid
    assert within.sample_r == pytest.approx(np.corrcoef(rx, ry)[0, 1], abs=1e-10)
    assert within.n == len(used) - (len(SITE_MEANS) - 1)


@pytest.mark.parametrize("model", ["separate", "partial"])
def test_the_planted_paradox_is_flagged_and_the_groups_cover_the_truth(tmp_path, model: str) -> None:  # type: ignore[no-untyped-def]
    spec, pair = _grouped_pair(tmp_path, paradox_frame(), GROUPED.replace('group_by = "site"',
                                                                          f'group_by = "site"\ngroups = "{model}"'))
    pooled = exact.exact_posterior(pair.stats.n, pair.stats.sample_r)
    assert pooled.prob_above(0.0) > 0.99  # the pooled correlation is positive
    analysis = group_analysis(spec, pair.groups, model, (1.0, 1.0), float(pooled.prob_above(0.0)),
                              float(pooled.median), "site")
    assert analysis.simpson
    assert "Simpson" in analysis.simpson_sentence
    # each group's 95% interval covers the simulated within-group rho (true for all five with this seed; the
    # chance that a given one misses is 5%, so this is a check of the numbers, not of a rare event)
    for fit in analysis.groups:
        summary = fit.pooled if model == "partial" else fit.alone
        assert summary.lower < WITHIN_RHO < summary.upper, fit.label
    assert analysis.within.upper < 0
    if model == "partial":
        assert analysis.mean is not None and analysis.mean.upper < 0
        assert np.isfinite(analysis.spread_median)


def test_no_warning_when_the_groups_agree_with_the_pool(tmp_path) -> None:  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(5)
    frames = []
    for label in ("A", "B", "C"):
        values = rng.multivariate_normal([0, 0], [[1, 0.5], [0.5, 1]], size=80)
        frames.append(pd.DataFrame({"site": label, "x": values[:, 0], "y": values[:, 1]}))
    spec, pair = _grouped_pair(tmp_path, pd.concat(frames, ignore_index=True))
    pooled = exact.exact_posterior(pair.stats.n, pair.stats.sample_r)
    analysis = group_analysis(spec, pair.groups, "separate", (1.0, 1.0), float(pooled.prob_above(0.0)),
                              float(pooled.median), "site")
    assert not analysis.simpson and analysis.simpson_sentence == ""
    assert len(analysis.comparisons) == 3  # three groups: every two are compared


def _exact_density(n: int, r: float):  # type: ignore[no-untyped-def]
    """The exact posterior density of rho under a uniform prior, normalised by scipy's quad (independent of the
    project's grid)."""
    def kernel(rho: float) -> float:
        return float(np.exp(exact.log_likelihood_kernel(np.array([rho]), n, r)[0] - shift))

    shift = float(exact.log_likelihood_kernel(np.array([r]), n, r)[0])
    total = integrate.quad(kernel, -1, 1, points=[r], limit=200)[0]
    return lambda rho: kernel(rho) / total


def test_group_comparisons_agree_with_a_scipy_convolution(tmp_path) -> None:  # type: ignore[no-untyped-def]
    # reference: P(rho_b > rho_a) and P(|rho_b - rho_a| > margin) as double integrals of the product of two
    # exact posterior densities (Jeffreys 1961), each normalised and integrated with scipy.integrate
    body = GROUPED + '\n[compare]\ngroups = ["S1", "S3"]\nmargin = 0.2\n'
    rng = np.random.default_rng(11)
    frames = []
    for label, rho, n in (("S1", 0.2, 40), ("S2", 0.0, 30), ("S3", 0.5, 60)):
        values = rng.multivariate_normal([0, 0], [[1, rho], [rho, 1]], size=n)
        frames.append(pd.DataFrame({"site": label, "x": values[:, 0], "y": values[:, 1]}))
    spec, pair = _grouped_pair(tmp_path, pd.concat(frames, ignore_index=True), body)
    analysis = group_analysis(spec, pair.groups, "separate", (1.0, 1.0), 0.5, 0.0, "site")
    assert [(c.first, c.second) for c in analysis.comparisons] == [("S1", "S3")]
    difference = analysis.comparisons[0].difference
    stats = {g.label: g.stats for g in pair.groups.groups}
    p_a = _exact_density(stats["S1"].n, stats["S1"].sample_r)
    p_b = _exact_density(stats["S3"].n, stats["S3"].sample_r)
    rose = integrate.dblquad(lambda b, a: p_a(a) * p_b(b), -1, 1, lambda a: a, 1, epsabs=1e-9)[0]
    above = integrate.dblquad(lambda b, a: p_a(a) * p_b(b), -1, 1, lambda a: min(a + 0.2, 1.0), 1, epsabs=1e-9)[0]
    below = integrate.dblquad(lambda b, a: p_a(a) * p_b(b), -1, 1, -1, lambda a: max(a - 0.2, -1.0), epsabs=1e-9)[0]
    assert difference.p_rose == pytest.approx(rose, abs=2e-4)
    assert difference.p_moved == pytest.approx(above + below, abs=2e-4)


def test_results_csv_has_a_row_per_group(tmp_path) -> None:  # type: ignore[no-untyped-def]
    from reportgen.results.outcome import pair_outcome
    from reportgen.results.pair import run_results

    spec, pair = _grouped_pair(tmp_path, paradox_frame())
    results = run_results(spec, (pair_outcome(spec, pair, {}, {}),))
    header, rows = results_rows(results)
    table = pd.DataFrame(rows, columns=header)
    assert list(table.group) == ["", "S1", "S2", "S3", "S4", "S5"]
    assert set(table.simpson_warning) == {"true"}
    assert set(table.groups_model) == {"separate"}
    frame = paradox_frame()
    for _, row in table.iloc[1:].iterrows():  # reference: numpy's corrcoef of the group's rows
        rows_of = frame[frame.site == row.group]
        assert float(row.sample_r) == pytest.approx(np.corrcoef(rows_of.x, rows_of.y)[0, 1], abs=1e-12)
        assert int(row.n) == len(rows_of)
    start = header.index("borderline_rules") + 1
    assert header[start:start + 5] == ["group", "groups_model", "group_spread_median", "simpson_warning", "controls"]


@pytest.mark.parametrize(("body", "words"), [
    ('group_by = "x"\n[[pairs]]\nx = "x"\ny = "y"\n', "one of the pair's own columns"),
    ('controls = ["y"]\n[[pairs]]\nx = "x"\ny = "y"\n', "adjusted for in its own correlation"),
    ('group_by = "site"\ncontrols = ["site"]\n[[pairs]]\nx = "x"\ny = "y"\n', "both the grouping column"),
    ('controls = ["z", "z"]\n[[pairs]]\nx = "x"\ny = "y"\n', "more than once"),
    ('groups = "pooled"\n[[pairs]]\nx = "x"\ny = "y"\n', "groups"),
])
def test_bad_grouping_keys_are_refused(tmp_path, body: str, words: str) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(SpecError, match=words):
        load_spec(spec_file(tmp_path, body))


def test_a_pair_can_switch_off_the_spec_wide_grouping(tmp_path) -> None:  # type: ignore[no-untyped-def]
    body = GROUPED + '\n[[pairs]]\nx = "x"\ny = "z"\ngroup_by = ""\n'
    frame = paradox_frame()
    frame["z"] = np.random.default_rng(1).normal(size=len(frame))
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(spec_file(tmp_path, body))
    first, second = load_pairs(spec, load_table(spec))
    assert first.groups is not None and second.groups is None


@pytest.mark.parametrize(("body", "words"), [
    (GROUPED.replace('group_by = "site"', 'group_by = "place"'), "column `place`"),
    (GROUPED + '\n[compare]\ngroups = ["S9"]\n', r"\[compare\] groups names \"S9\""),
])
def test_bad_grouping_data_is_refused(tmp_path, body: str, words: str) -> None:  # type: ignore[no-untyped-def]
    paradox_frame().to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(spec_file(tmp_path, body))
    with pytest.raises(DataError, match=words):
        load_pairs(spec, load_table(spec))


@pytest.mark.usefixtures("placeholder_pdf")  # the HTML and the results are read
def test_the_report_leads_with_the_warning_and_shows_the_groups(tmp_path) -> None:  # type: ignore[no-untyped-def]
    import reportgen

    paradox_frame().to_csv(tmp_path / "data.csv", index=False)
    spec = spec_file(tmp_path, GROUPED.replace('group_by = "site"', 'group_by = "site"\ngroups = "partial"'))
    table = reportgen.run(spec, tmp_path / "out", engine="exact")
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    # page one (before the summary section) carries the warning; the pair's page leads with the groups
    assert html.index("Groups pull the other way") < html.index('id="summary"')
    pair_page = html[html.index('<section class="pair'):]
    assert pair_page.index("Site by site") < pair_page.index("All rows together")
    assert "Forest plot of the correlation in each group" in pair_page
    assert "tiny (only 3 complete rows" in pair_page  # the left-out group is listed, with its reason
    assert list(table["group"].fillna("")) == ["", "S1", "S2", "S3", "S4", "S5"]
    assert "Partially pooled pairs treat" in html  # the methods section names the hierarchical model
