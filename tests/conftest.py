"""Shared fixtures: small specs written to temporary folders, and one compiled model per session."""

from __future__ import annotations

import contextlib
import textwrap
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

QUICK_SAMPLER = """
[sampler]
draws = 400
tune = 400
chains = 2
seed = 7

[diagnostics]
ess_min = 100
rhat_max = 1.05  # small test runs: 2 short chains give noisier R-hat
"""


def write_spec(folder: Path, body: str, *, data_name: str = "data.csv", quick: bool = True) -> Path:
    """A spec file in ``folder`` whose data path is ``data_name``; ``body`` adds tables."""
    text = textwrap.dedent(f"""
        [report]
        title = "Test report"
        date = 2026-01-15

        [data]
        path = "{data_name}"
    """) + textwrap.dedent(body) + (QUICK_SAMPLER if quick else "")
    path = folder / "spec.toml"
    path.write_text(text, encoding="utf-8")
    return path


def correlated_frame(n: int, rho: float, seed: int, names: tuple[str, str] = ("a", "b")) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    cov = np.array([[1.0, rho], [rho, 1.0]])
    values = rng.multivariate_normal([10.0, -3.0], cov * np.array([[4.0, 2.0], [2.0, 1.0]]), size=n)
    return pd.DataFrame({names[0]: values[:, 0], names[1]: values[:, 1]})


# A stand-in for the report's PDF in runs whose checks read no page of it (publishing, comparing two runs'
# folders, the Python entry points): the run still builds the figures and the HTML and publishes a report.pdf,
# but the pages are not laid out and drawn, which is most of a small run's seconds. The PDF itself is checked
# by test_end_to_end, test_verify, test_quick, test_change_report, test_report*.py and test_figures*.py.
PLACEHOLDER_PDF = b"%PDF-1.7\n% placeholder: this test reads no page of the report\n%%EOF\n"
# set for child processes that run reportgen through a test wrapper, which then installs the stand-in too
PLACEHOLDER_PDF_VARIABLE = "REPORTGEN_TEST_PLACEHOLDER_PDF"


def placeholder_render_pdf(html: str, report_date: str) -> tuple[bytes, tuple[str, ...]]:
    return PLACEHOLDER_PDF, ()


@contextlib.contextmanager
def pages_not_drawn() -> Iterator[None]:
    """Runs inside the block, here and in child processes started with this environment, write
    ``PLACEHOLDER_PDF`` as their report.pdf."""
    from reportgen import report

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(report, "render_pdf", placeholder_render_pdf)
        patch.setenv(PLACEHOLDER_PDF_VARIABLE, "1")
        yield


@pytest.fixture
def placeholder_pdf() -> Iterator[None]:
    with pages_not_drawn():
        yield


@pytest.fixture(scope="session")
def last_month(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """One finished exact-engine run (spec, data and output folder), made once for the tests of publishing
    and of signals, which copy it and read no page of its PDF."""
    from tests.test_publish import finished_run

    with pages_not_drawn():
        return finished_run(tmp_path_factory.mktemp("last_month"))


@pytest.fixture
def draws_without_netcdf(monkeypatch: pytest.MonkeyPatch) -> None:
    """Fits that keep their draws but not the netCDF bytes of their draws file.

    Writing one fit's sampler output as netCDF costs about 0.2 s, four fifths of a short fit of 200 draws;
    calibration tests make hundreds of fits and read only the draws of rho, never the file.
    """
    from reportgen import fit

    monkeypatch.setattr(fit, "netcdf_bytes", lambda idata: b"")


@pytest.fixture
def simple_project(tmp_path: Path) -> Path:
    """A folder with data.csv (columns a, b, c) and a valid spec for (a, b)."""
    frame = correlated_frame(50, 0.6, seed=1)
    frame["c"] = np.random.default_rng(2).normal(size=50)
    frame.to_csv(tmp_path / "data.csv", index=False)
    write_spec(tmp_path, """
        [[pairs]]
        x = "a"
        y = "b"
    """)
    return tmp_path
