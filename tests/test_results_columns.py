"""results.csv as scripts read it: every column documented in the README, one scale per quantity, and an
older run's columns still understood when it is verified."""

from __future__ import annotations

import csv
import math
import re
from pathlib import Path

import reportgen
from reportgen.runs.verify import upgraded_row
from tests.conftest import correlated_frame, write_spec

README = Path(__file__).resolve().parents[1] / "README.md"


def _documented_columns() -> set[str]:
    """Every `name` in the first cell of a README table row."""
    names: set[str] = set()
    for line in README.read_text(encoding="utf-8").splitlines():
        if line.startswith("| `"):
            names.update(re.findall(r"`([a-z_<>0-9]+)`", line.split("|")[1]))
    return names


def test_every_results_column_is_documented_and_logs_are_natural(tmp_path: Path) -> None:
    correlated_frame(30, 0.5, seed=4).to_csv(tmp_path / "data.csv", index=False)
    spec = write_spec(tmp_path, """
        [[pairs]]
        x = "a"
        y = "b"

        [[rules]]
        name = "material"
        statement = "above"
        threshold = 0.2
    """, quick=False)
    frame = reportgen.run(spec, tmp_path / "out", engine="exact")
    with (tmp_path / "out" / "results.csv").open(encoding="utf-8", newline="") as handle:
        header = next(csv.reader(handle))
    documented = _documented_columns()
    generic = {re.sub(r"^p_material", "p_<rule>", column) for column in header}
    assert generic <= documented, sorted(generic - documented)
    assert {"ln_bf10", "ln_bf10_savage_dickey", "interval_kind", "interval_mass"} <= set(header)
    assert not {"log_bf10", "savage_dickey_bf10", "interval"} & set(header)
    row = frame.iloc[0]
    assert row["interval_kind"] == "central" and row["interval_mass"] == 0.95
    # the exact BF10 of Jeffreys (1961) for n = 30: its log is the column; a positive r at n = 30 favours
    # a correlation, so ln BF10 > 0 (Ly, Marsman & Wagenmakers 2018, eq. for the uniform prior)
    assert math.isfinite(row["ln_bf10"]) and row["ln_bf10"] > 0


def test_an_older_runs_columns_are_mapped_onto_todays() -> None:
    old = {"pair": "a vs b", "log_bf10": "2.5", "savage_dickey_bf10": "10.0", "interval": "hdi 0.9"}
    new = upgraded_row(old)
    assert new["ln_bf10"] == "2.5" and "log_bf10" not in new
    assert math.isclose(float(new["ln_bf10_savage_dickey"]), math.log(10.0), rel_tol=1e-15)
    assert (new["interval_kind"], new["interval_mass"]) == ("hdi", "0.9")
    assert upgraded_row({"pair": "x", "savage_dickey_bf10": ""})["ln_bf10_savage_dickey"] == ""
