"""The benchmarks' invented data: K columns sharing three latent factors, so pairs of every strength occur,
written beside a spec that pairs every column with every other.

Seeded, so every benchmark run measures the same table.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd


def write_project(folder: Path, columns: int, rows: int, *, top: str = "", report: str = "", tail: str = "",
                  noise: float = 1.0, name_width: int = 2) -> Path:
    """Write data.csv and spec.toml into ``folder``; ``top``, ``report`` and ``tail`` are TOML added before
    the tables, inside ``[report]`` and at the end. Returns the spec's path."""
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(0)
    latent = rng.normal(size=(rows, 3))
    loadings = rng.normal(size=(3, columns))
    frame = pd.DataFrame(latent @ loadings + rng.normal(size=(rows, columns)) * noise,
                         columns=[f"v{i:0{name_width}d}" for i in range(columns)])
    frame.to_csv(folder / "data.csv", index=False)
    names = ", ".join(f'"{c}"' for c in frame.columns)
    (folder / "spec.toml").write_text(
        f'{top}\n[report]\ntitle = "Benchmark"\ndate = 2026-01-01\n{report}\n[data]\npath = "data.csv"\n'
        f'[[pair_sets]]\nname = "all"\ncolumns = [{names}]\n{tail}', encoding="utf-8")
    return folder / "spec.toml"
