"""The Python entry points: reportgen.run (a spec run returning results.csv as a DataFrame, optionally
reading a DataFrame) and reportgen.fit_pair (one pair, no report)."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

import reportgen
from reportgen.errors import DataError, ReportgenError, SpecError
from reportgen.runner import TEXT_COLUMNS
from tests.conftest import correlated_frame, pages_not_drawn, write_spec

RULES = """
[[rules]]
name = "above_zero"
statement = "above"
threshold = 0.0

[[rules]]
name = "strong"
statement = "above"
threshold = 0.7
"""


def _frame() -> pd.DataFrame:
    frame = correlated_frame(60, 0.5, seed=11)
    frame["c"] = np.random.default_rng(12).integers(0, 9, size=60)  # an int column: written without ".0"
    frame.loc[[4, 17], "b"] = np.nan  # missing values, dropped listwise per pair
    return frame


@pytest.fixture(scope="module")
def file_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, pd.DataFrame, pd.DataFrame]:
    """One exact-engine run from a CSV file: (its folder, the frame written, the frame run returned)."""
    folder = tmp_path_factory.mktemp("api")
    frame = _frame()
    frame.to_csv(folder / "data.csv", index=False)  # pandas' own writer makes the reference file
    spec = write_spec(folder, """
        [[pairs]]
        x = "a"
        y = "b"

        [[pairs]]
        x = "a"
        y = "c"
    """ + RULES)
    with pages_not_drawn():  # these tests read the results and the record, no page of the report
        returned = reportgen.run(spec, folder / "out", engine="exact")
    return folder, frame, returned


def _column_values(frame: pd.DataFrame, column: str) -> np.ndarray:
    return frame[column].to_numpy(dtype=float)


def test_returned_frame_is_results_csv(file_run: tuple[Path, pd.DataFrame, pd.DataFrame]) -> None:
    folder, _, returned = file_run
    # read back with pandas' CSV reader as text, so that nothing is guessed; no cell here starts with a
    # character that gets the spreadsheet apostrophe, so the text is the file's as it stands
    written = pd.read_csv(folder / "out" / "results.csv", dtype=str, keep_default_na=False)
    assert list(returned.columns) == list(written.columns)
    assert len(returned) == len(written) == 2
    for column in written.columns:
        if column in TEXT_COLUMNS or column == "borderline_rules":
            assert returned[column].tolist() == written[column].tolist(), column
        else:
            assert returned[column].dtype == np.float64, column
            expected = pd.to_numeric(written[column].replace("", np.nan)).to_numpy(dtype=float)
            np.testing.assert_array_equal(_column_values(returned, column), expected, err_msg=column)
    assert returned.attrs["status"] == "pass"
    assert returned.attrs["out_dir"] == folder / "out"


def test_sample_r_and_n_match_scipy(file_run: tuple[Path, pd.DataFrame, pd.DataFrame]) -> None:
    _, frame, returned = file_run
    complete = frame[["a", "b"]].dropna()
    row = returned.set_index("pair").loc["a vs b"]
    assert row["n"] == len(complete) == 58 and row["n_dropped"] == 2
    # reference: scipy.stats.pearsonr on the complete rows
    assert row["sample_r"] == pytest.approx(stats.pearsonr(complete["a"], complete["b"]).statistic, abs=1e-12)


@pytest.mark.usefixtures("placeholder_pdf")
def test_dataframe_gives_the_file_results(file_run: tuple[Path, pd.DataFrame, pd.DataFrame]) -> None:
    folder, frame, from_file = file_run
    # the spec still names data.csv, but the DataFrame replaces it (the file is removed to prove it)
    spec = reportgen.load_spec(folder / "spec.toml")
    (folder / "data.csv").rename(folder / "moved.csv")
    try:
        from_frame = reportgen.run(spec, folder / "from_frame", data=frame, engine="exact")
    finally:
        (folder / "moved.csv").rename(folder / "data.csv")
    pd.testing.assert_frame_equal(from_frame, from_file)
    record = json.loads((folder / "from_frame" / "record.json").read_text(encoding="utf-8"))
    reproducible = record["reproducible"]
    assert reproducible["data_file"] == "dataframe.csv"
    assert "pandas DataFrame" in reproducible["command_line_overrides"]["data"]
    # the hash is the frame's CSV bytes as pandas writes them (without the index): deterministic
    expected = hashlib.sha256(frame.to_csv(index=False, lineterminator="\n").encode("utf-8")).hexdigest()
    assert reproducible["data_sha256"] == expected
    assert reproducible["data_sha256"] == hashlib.sha256((folder / "data.csv").read_bytes()).hexdigest()


@pytest.mark.usefixtures("placeholder_pdf")
def test_overrides_reach_the_record(tmp_path: Path) -> None:
    frame = correlated_frame(30, 0.3, seed=3)
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = write_spec(tmp_path, """
        [[pairs]]
        x = "a"
        y = "b"
    """)
    returned = reportgen.run(spec, tmp_path / "out", engine="exact", seed=99, draws=300)
    record = json.loads((tmp_path / "out" / "record.json").read_text(encoding="utf-8"))
    assert record["reproducible"]["command_line_overrides"] == {"sampler.seed": "99", "sampler.draws": "300",
                                                                "engine": "exact"}
    assert returned["engine"].tolist() == ["exact"]
    with pytest.raises(SpecError, match="engine must be one of mcmc, exact"):
        reportgen.run(spec, tmp_path / "out2", engine="gibbs")
    with pytest.raises(SpecError, match="--draws"):  # the command line's own check and message
        reportgen.run(spec, tmp_path / "out3", draws=1)
    assert not (tmp_path / "out2").exists() and not (tmp_path / "out3").exists()


def _one_line(exc: ReportgenError) -> str:
    text = str(exc)
    assert "\n" not in text
    return text


@pytest.mark.parametrize(("change", "expected"), [
    (lambda f: f.assign(b=["abc" if i == 3 else str(v) for i, v in enumerate(f["b"])]),
     r"column `b` has non-numeric values at row 5 \('abc'\)"),  # frame row 3 is CSV line 5 (header = 1)
    (lambda f: f.head(3), "has only 3 complete rows"),
    (lambda f: f.assign(b=2.0 * f["a"] + 1.0), "perfectly correlated"),
    (lambda f: f.drop(columns="b"), "column `b` .* is not in the data"),
])
def test_dataframe_errors_are_ours(tmp_path: Path, change: object, expected: str) -> None:
    spec = write_spec(tmp_path, """
        [[pairs]]
        x = "a"
        y = "b"
    """)
    frame = change(correlated_frame(20, 0.4, seed=5))  # type: ignore[operator]
    with pytest.raises(DataError, match=expected) as caught:
        reportgen.run(spec, tmp_path / "out", data=frame, engine="exact")
    text = _one_line(caught.value)
    assert text.startswith("data (the DataFrame") and "dataframe.csv" not in text
    assert not (tmp_path / "out").exists()


# ------------------------------------------------------------------------------------------ fit_pair


def _jeffreys_posterior_moments(n: int, r: float) -> tuple[float, float]:
    """Posterior mean and SD of rho under a uniform prior on rho and Jeffreys' priors (flat means, 1/sigma
    SDs), by brute-force nested quadrature of the kernel (1 - rho^2)^((n-1)/2) * int_0^inf (cosh w - rho r)^
    -(n-1) dw (Jeffreys 1961, Theory of Probability, ch. 5; Ly, Marsman & Wagenmakers 2018)."""
    def kernel(rho: float) -> float:
        inner = integrate.quad(lambda w: (np.cosh(w) - rho * r) ** -(n - 1), 0.0, np.inf)[0]
        return (1.0 - rho * rho) ** ((n - 1) / 2) * inner

    total = integrate.quad(kernel, -1.0, 1.0, points=[r], limit=200)[0]
    mean = integrate.quad(lambda t: t * kernel(t), -1.0, 1.0, points=[r], limit=200)[0] / total
    second = integrate.quad(lambda t: t * t * kernel(t), -1.0, 1.0, points=[r], limit=200)[0] / total
    return mean, float(np.sqrt(second - mean * mean))


def test_fit_pair_exact_matches_brute_force() -> None:
    frame = correlated_frame(40, 0.6, seed=21)
    x, y = frame["a"].to_numpy(), frame["b"].to_numpy()
    result = reportgen.fit_pair(x, y, engine="exact", rules=[{"name": "above_zero", "statement": "above",
                                                              "threshold": 0.0}])
    r = stats.pearsonr(x, y).statistic  # reference: scipy
    assert result.sample_r == pytest.approx(r, abs=1e-12)
    mean, sd = _jeffreys_posterior_moments(40, r)
    assert result.mean == pytest.approx(mean, abs=1e-6)
    assert result.sd == pytest.approx(sd, abs=1e-6)
    assert result.interval[0] < result.median < result.interval[1]
    assert (result.n, result.engine, result.model, result.status) == (40, "exact", "normal", "pass")
    (rule,) = result.rules
    assert rule.name == "above_zero" and rule.mcse == 0.0 and rule.probability == pytest.approx(result.p_positive)
    assert "median=" in repr(result)


def test_fit_pair_drops_missing_rows_and_names_series() -> None:
    frame = correlated_frame(25, 0.2, seed=8, names=("temp", "oxygen"))
    frame.loc[[0, 9], "oxygen"] = np.nan
    result = reportgen.fit_pair(frame["temp"], frame["oxygen"], engine="exact")
    assert (result.n, result.n_dropped) == (23, 2)
    assert result.result.key == "temp vs oxygen"
    complete = frame.dropna()
    assert result.sample_r == pytest.approx(stats.pearsonr(complete["temp"], complete["oxygen"]).statistic,
                                            abs=1e-12)


@pytest.mark.parametrize(("x", "y", "error", "expected"), [
    ([1.0, 2.0, 3.0], [2.0, 1.0, 4.0], DataError, "only 3 complete rows"),
    ([1.0, 2.0, 3.0, 4.0, 5.0], [7.0, 7.0, 7.0, 7.0, 7.0], DataError, "column `y` is constant"),
    ([1.0, 2.0, 3.0, 4.0, 5.0], [3.0, 5.0, 7.0, 9.0, 11.0], DataError, "perfectly correlated"),
    ([1.0, 2.0, np.inf, 4.0, 5.0], [1.0, 3.0, 2.0, 5.0, 4.0], DataError, "infinite or out-of-range value at row 3"),
    ([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0], DataError, "has 4 values and `y` 3"),
    ([1.0, 2.0, 4.0, 3.0], [1.0, 3.0, 2.0, 4.0], SpecError, "credible_mass"),  # mass=1.5 below
])
def test_fit_pair_errors(x: list[float], y: list[float], error: type[ReportgenError], expected: str) -> None:
    mass = 1.5 if error is SpecError else 0.95
    with pytest.raises(error, match=expected) as caught:
        reportgen.fit_pair(x, y, engine="exact", mass=mass)
    assert _one_line(caught.value).startswith("fit_pair")


def test_fit_pair_mcmc_small() -> None:
    frame = correlated_frame(40, 0.6, seed=21)
    x, y = frame["a"].to_numpy(), frame["b"].to_numpy()
    result = reportgen.fit_pair(x, y, sampler={"draws": 200, "tune": 200, "chains": 2, "seed": 3},
                                rules=[{"name": "strong", "statement": "above", "threshold": 0.5}])
    assert result.engine == "mcmc" and result.status in ("pass", "warn", "fail")
    (rule,) = result.rules
    assert 0.0 < rule.probability < 1.0 and rule.mcse > 0.0
    # the spec's default priors are weakly informative, not Jeffreys': with 40 rows the posterior mean of rho
    # moves by far less than 0.05 (0.05 also covers Monte Carlo error with 400 draws, sd about 0.1)
    mean, _ = _jeffreys_posterior_moments(40, stats.pearsonr(x, y).statistic)
    assert result.mean == pytest.approx(mean, abs=0.05)
    again = reportgen.fit_pair(x, y, sampler={"draws": 200, "tune": 200, "chains": 2, "seed": 3},
                               rules=[{"name": "strong", "statement": "above", "threshold": 0.5}])
    assert again.mean == result.mean  # same seed, same process: the same draws
