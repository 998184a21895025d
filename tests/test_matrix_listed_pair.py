"""A listed pair inside a pair set is fitted once and still stands in that set's matrix."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

import reportgen
from reportgen.report import context

SPEC = """engine = "exact"
[report]
title = "Listed pair in a set"
[data]
path = "data.csv"
[[pairs]]
x = "b"
y = "a"
label = "The listed pair"
[[pair_sets]]
name = "trio"
columns = ["a", "b", "c"]
"""


@pytest.mark.usefixtures("placeholder_pdf")  # the results and the figure drawn are read
def test_the_listed_pair_is_fitted_once_and_shown_in_the_matrix(tmp_path: Path,
                                                              monkeypatch: pytest.MonkeyPatch) -> None:
    rng = np.random.default_rng(3)
    a = rng.normal(size=40)
    frame = pd.DataFrame({"a": a, "b": 0.7 * a + 0.5 * rng.normal(size=40), "c": rng.normal(size=40)})
    frame.to_csv(tmp_path / "data.csv", index=False)
    (tmp_path / "spec.toml").write_text(SPEC, encoding="utf-8")
    drawn: list[Any] = []
    real = context.figures.correlation_matrix

    def recording(labels: list[str], medians: np.ndarray, excludes: np.ndarray) -> str:
        drawn.append(medians.copy())
        return real(labels, medians, excludes)

    monkeypatch.setattr(context.figures, "correlation_matrix", recording)
    results = reportgen.run(tmp_path / "spec.toml", tmp_path / "out")
    assert len(results) == 3  # a-b once (the listed pair), a-c, b-c
    listed = results[results["pair"] == "b vs a"]
    assert len(listed) == 1
    (medians,) = drawn
    # every off-diagonal cell below the diagonal is filled, the listed pair's with its own median
    assert np.isfinite(medians[np.tril_indices(3, -1)]).all()
    assert medians[1, 0] == pytest.approx(float(listed["rho_median"].iloc[0]))
