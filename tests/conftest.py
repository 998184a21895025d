"""Shared fixtures: small specs written to temporary folders, and one compiled model per session."""

from __future__ import annotations

import textwrap
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
