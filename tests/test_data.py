"""The data stage: reading, per-pair selection, sufficient statistics."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from reportgen.data import load_pairs, load_table, sufficient_stats
from reportgen.errors import DataError
from reportgen.spec import load_spec
from tests.conftest import write_spec

PAIR_AB = """
[[pairs]]
x = "a"
y = "b"
"""


def test_sample_r_matches_scipy_pearsonr() -> None:
    """scipy.stats.pearsonr is the reference implementation of Pearson's r."""
    rng = np.random.default_rng(3)
    for n, rho in [(5, 0.2), (60, -0.7), (5000, 0.95)]:
        x = rng.normal(1e3, 5.0, n)
        y = rho * (x - 1e3) / 5.0 + rng.normal(0, 1, n) + 40.0
        assert sufficient_stats(x, y).sample_r == pytest.approx(stats.pearsonr(x, y).statistic, abs=1e-12)


def test_sufficient_statistics_match_numpy() -> None:
    rng = np.random.default_rng(4)
    x, y = rng.normal(size=200), rng.normal(size=200)
    s = sufficient_stats(x, y)
    assert s.sd_x == pytest.approx(np.std(x, ddof=1), rel=1e-12)
    assert s.sxy == pytest.approx(np.cov(x, y, ddof=0)[0, 1] * 200, rel=1e-10)


def test_listwise_deletion_counts_dropped_rows(tmp_path: Path) -> None:
    frame = pd.DataFrame({"a": [1, 2, None, 4, 5, 6], "b": [2, 1, 3, None, 5, 7]})
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(write_spec(tmp_path, PAIR_AB))
    (pair,) = load_pairs(spec, load_table(spec))
    assert (pair.stats.n, pair.n_dropped) == (4, 2)


def test_missing_policy_fail_refuses_missing_values(tmp_path: Path) -> None:
    pd.DataFrame({"a": [1, 2, None, 4, 5], "b": [2, 1, 3, 4, 5]}).to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(write_spec(tmp_path, PAIR_AB.replace("[[pairs]]", "[[pairs]]", 1)
                                .replace('x = "a"', 'x = "a"') + ""))
    spec = spec.model_copy(update={"document": spec.document.model_copy(update={
        "data": spec.document.data.model_copy(update={"missing": "fail"})})})
    with pytest.raises(DataError, match="row 4"):
        load_pairs(spec, load_table(spec))


@pytest.mark.parametrize(("frame", "message"), [
    (pd.DataFrame({"a": [1, 2, 3], "b": [3, 1, 2]}), "at least 4"),
    (pd.DataFrame({"a": [1, 1, 1, 1, 1], "b": [3, 1, 2, 5, 4]}), "constant"),
    (pd.DataFrame({"a": ["1", "2", "x7", "4", "5"], "b": [3, 1, 2, 5, 4]}), r"row 4 \('x7'\)"),
    (pd.DataFrame({"a": [1, 2, np.inf, 4, 5], "b": [3, 1, 2, 5, 4]}), "infinite"),
])
def test_unfittable_pairs_are_refused_with_the_reason(tmp_path: Path, frame: pd.DataFrame, message: str) -> None:
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(write_spec(tmp_path, PAIR_AB))
    with pytest.raises(DataError, match=message):
        load_pairs(spec, load_table(spec))


def test_unknown_column_lists_close_matches(tmp_path: Path) -> None:
    pd.DataFrame({"alpha": [1, 2, 3, 4], "b": [1, 3, 2, 4]}).to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(write_spec(tmp_path, PAIR_AB.replace('"a"', '"alpah"')))
    with pytest.raises(DataError, match="close matches: alpha"):
        load_table(spec)


def test_excel_and_parquet_give_the_same_pairs(tmp_path: Path) -> None:
    frame = pd.DataFrame({"a": [1.0, 2.5, 3.1, 4.7, 5.2], "b": [2.0, 1.0, 3.5, 4.0, 6.1]})
    frame.to_excel(tmp_path / "data.xlsx", index=False)
    frame.to_parquet(tmp_path / "data.parquet")
    results = []
    for name in ("data.xlsx", "data.parquet"):
        spec = load_spec(write_spec(tmp_path, PAIR_AB, data_name=name))
        (pair,) = load_pairs(spec, load_table(spec))
        results.append(pair.stats)
    assert results[0] == results[1]
    assert results[0].sample_r == pytest.approx(stats.pearsonr(frame.a, frame.b).statistic, abs=1e-12)


def test_data_file_hash_is_sha256_of_bytes(simple_project: Path) -> None:
    import hashlib

    spec = load_spec(simple_project / "spec.toml")
    table = load_table(spec)
    assert table.sha256 == hashlib.sha256((simple_project / "data.csv").read_bytes()).hexdigest()


def test_latin1_csv_is_read(tmp_path: Path) -> None:
    (tmp_path / "data.csv").write_bytes("a,b,caf\xe9\n1,2,x\n2,1,y\n3,4,z\n4,3,w\n".encode("latin-1"))
    spec = load_spec(write_spec(tmp_path, PAIR_AB))
    table = load_table(spec)
    assert table.encoding in {"cp1252", "latin-1"}
    assert "café" in table.frame.columns
