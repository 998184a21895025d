"""Loading many pairs: each column is parsed and centred once and shared by the pairs that name it, and every
pair gets exactly what it would get loaded on its own."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import reportgen.data as data_stage
from reportgen.data import PairData, TableColumns, load_pairs, load_table, pair_data
from reportgen.errors import DataError
from reportgen.spec import load_spec
from tests.conftest import write_spec

COLUMNS = ("a", "b", "c", "d", "e")


def _frame(rows: int = 60) -> pd.DataFrame:
    """Five related columns: a and b complete, c and d with gaps in different rows, e far from zero."""
    rng = np.random.default_rng(11)
    latent = rng.normal(size=rows)
    frame = pd.DataFrame({name: latent * (0.3 + 0.2 * i) + rng.normal(size=rows) for i, name in enumerate(COLUMNS)})
    frame.loc[[3, 17, 40], "c"] = np.nan
    frame.loc[[5, 17], "d"] = np.nan
    frame["e"] += 1e9
    frame["site"] = rng.choice(["north", "south", "site 10", "site 2"], rows)
    frame["age"] = rng.normal(40, 10, rows)
    return frame


def _project(tmp_path: Path, settings: str = "") -> Path:
    """The frame and a spec pairing its five columns; ``settings`` are added to the pair set's table."""
    _frame().to_csv(tmp_path / "data.csv", index=False)
    columns = ", ".join(f'"{c}"' for c in COLUMNS)
    return write_spec(tmp_path, f'[[pair_sets]]\nname = "all"\ncolumns = [{columns}]\n{settings}\n')


def _same(first: PairData, second: PairData) -> None:
    """Bit-for-bit the same pair: the same floats, rows, groups and adjustment."""
    for field in dataclasses.fields(PairData):
        one, other = getattr(first, field.name), getattr(second, field.name)
        if isinstance(one, np.ndarray):
            assert one.dtype == other.dtype and one.tobytes() == other.tobytes(), field.name
        elif field.name == "adjustment" and one is not None:
            for part in dataclasses.fields(one):
                a, b = getattr(one, part.name), getattr(other, part.name)
                assert np.array_equal(a, b) if isinstance(a, np.ndarray) else a == b, part.name
        else:
            assert one == other, field.name


@pytest.mark.parametrize("settings", ["", 'group_by = "site"', 'controls = ["age"]'])
def test_shared_columns_give_each_pair_what_it_gets_loaded_alone(tmp_path: Path, settings: str) -> None:
    spec = load_spec(_project(tmp_path, settings))
    table = load_table(spec)
    shared = load_pairs(spec, table)
    assert len(shared) == 10  # 5 columns, 5 choose 2 pairs
    for pair in shared:
        _same(pair, pair_data(table, pair.pair, "listwise"))  # a new TableColumns: parsed for this pair only


def test_each_pair_s_sums_match_pandas_and_scipy_on_its_complete_rows(tmp_path: Path) -> None:
    """The reference: pandas' dropna for the complete rows, numpy's mean and scipy.stats.pearsonr on them,
    for pairs that keep every row of a column and pairs that drop rows of one or both."""
    spec = load_spec(_project(tmp_path))
    frame = _frame()
    for pair in load_pairs(spec, load_table(spec)):
        rows = frame[[pair.pair.x, pair.pair.y]].dropna()
        assert (pair.stats.n, pair.n_dropped) == (len(rows), len(frame) - len(rows))
        assert pair.rows.tolist() == [line + 2 for line in rows.index]  # CSV lines, the header on line 1
        assert pair.stats.mean_x == pytest.approx(np.mean(rows[pair.pair.x]), rel=1e-14)
        assert pair.stats.mean_y == pytest.approx(np.mean(rows[pair.pair.y]), rel=1e-14)
        expected = stats.pearsonr(rows[pair.pair.x], rows[pair.pair.y]).statistic
        assert pair.stats.sample_r == pytest.approx(expected, abs=1e-12)


def test_a_column_in_many_pairs_is_parsed_once(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    spec = load_spec(_project(tmp_path, 'controls = ["age"]'))
    table = load_table(spec)
    parsed: list[str] = []
    original = data_stage._numeric_column

    def counting(table_: object, column: str) -> np.ndarray:
        parsed.append(column)
        return original(table_, column)

    monkeypatch.setattr(data_stage, "_numeric_column", counting)
    load_pairs(spec, table)
    assert sorted(parsed) == sorted((*COLUMNS, "age"))


def test_a_bad_cell_is_reported_for_the_first_pair_that_needs_its_column(tmp_path: Path) -> None:
    path = _project(tmp_path)
    frame = _frame().astype({"c": object})
    frame.loc[8, "c"] = "n.a."
    frame.to_csv(tmp_path / "data.csv", index=False)
    spec = load_spec(path)
    table = load_table(spec)
    with pytest.raises(DataError) as shared:
        load_pairs(spec, table)
    first = next(pair for pair in spec.pairs if "c" in (pair.x, pair.y))
    with pytest.raises(DataError) as alone:
        pair_data(table, first, "listwise")
    assert str(shared.value) == str(alone.value)
    assert "column `c` has non-numeric values at row 10 ('n.a.')" in str(shared.value)


def test_centred_column_is_the_centring_of_its_present_values(tmp_path: Path) -> None:
    spec = load_spec(_project(tmp_path))
    columns = TableColumns(load_table(spec))
    values = _frame()["c"].dropna().to_numpy()
    centred = columns.centred("c")
    assert columns.present("c") == values.size == 57
    assert centred.mean == pytest.approx(values.mean(), rel=1e-14)
    assert centred.deviations == pytest.approx(values - values.mean(), abs=1e-12)
    assert centred.squares == pytest.approx(float(((values - values.mean()) ** 2).sum()), rel=1e-12)
    assert all(columns.values(name) is columns.values(name) for name in COLUMNS)
    assert columns.rows[:3].tolist() == [2, 3, 4]
