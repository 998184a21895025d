"""Generate the bundled demo table: an invented river-monitoring survey.

The Quillmere Catchment Trust and its stations are fictional. Values are drawn
from a fixed seed so the table, and so the demo report, is reproducible:

    python scripts/make_demo_data.py  # rewrites reportgen/demo/quillmere_survey.csv
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261130
STATIONS = ("QC-01 Upper Weir", "QC-02 Mill Leat", "QC-03 Ferny Bend", "QC-04 Old Ford",
            "QC-05 Reed Flats", "QC-06 Lock Gate", "QC-07 Estuary Mouth")
MONTHS = 12
OUTPUT = Path(__file__).resolve().parents[1] / "reportgen" / "demo" / "quillmere_survey.csv"


def make_survey(seed: int = SEED) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = len(STATIONS) * MONTHS
    station = np.repeat(STATIONS, MONTHS)
    month = np.tile(np.arange(1, MONTHS + 1), len(STATIONS))
    season = np.cos(2 * np.pi * (month - 7) / 12)  # +1 in July, -1 in January

    # Strong positive: suspended solids track turbidity closely.
    turbidity = rng.lognormal(mean=2.2, sigma=0.45, size=rows)
    solids = 1.6 * turbidity + rng.normal(0, 2.2, rows) + 3.0

    # Strong negative: warmer water holds less oxygen.
    temperature = 11 + 6 * season + rng.normal(0, 1.6, rows)
    oxygen = 14.2 - 0.33 * temperature + rng.normal(0, 0.55, rows)

    # Near zero: pH and conductivity vary independently here.
    ph = rng.normal(7.4, 0.25, rows)
    conductivity = rng.normal(420, 55, rows)

    # Nutrients and algae: moderate, noisy links.
    nitrate = rng.gamma(shape=6.0, scale=0.55, size=rows)
    phosphate = 0.018 * nitrate + rng.normal(0, 0.028, rows) + 0.06
    chlorophyll = 2.0 + 0.9 * nitrate + 14 * phosphate + rng.normal(0, 2.4, rows)

    # Sensor drop-outs: the chlorophyll probe failed on some visits.
    chlorophyll[rng.random(rows) < 0.12] = np.nan

    # Drawn after everything above, so the earlier columns stay as they were.
    # Rainfall in the 24 hours before the visit and E. coli counts: unrelated on ordinary visits, but two
    # visits came straight after storms, with extreme values of both. Those two rows alone make the
    # correlation look strong; the checks are meant to find them.
    rainfall = rng.gamma(shape=1.4, scale=3.0, size=rows)
    e_coli = rng.lognormal(mean=5.0, sigma=0.35, size=rows)
    for storm_row, rain, count in ((39, 58.0, 2900.0), (64, 64.0, 3400.0)):
        rainfall[storm_row] = rain
        e_coli[storm_row] = count

    # Two survey scores on ordinal scales with heavy ties: bank erosion (0 = none to 4 = severe) and the
    # invertebrate class (1 = poor to 5 = excellent), linked through one latent condition of the reach.
    condition = rng.normal(size=rows)
    erosion = np.digitize(-0.8 * condition + rng.normal(0, 0.6, rows), [-1.2, -0.3, 0.5, 1.3])
    invertebrates = 1 + np.digitize(0.8 * condition + rng.normal(0, 0.6, rows), [-1.0, -0.2, 0.6, 1.4])

    return pd.DataFrame({
        "station": station,
        "month": month,
        "turbidity_ntu": turbidity.round(2),
        "suspended_solids_mg_l": solids.round(1),
        "water_temp_c": temperature.round(1),
        "dissolved_oxygen_mg_l": oxygen.round(2),
        "ph": ph.round(2),
        "conductivity_us_cm": conductivity.round(0),
        "nitrate_mg_l": nitrate.round(2),
        "phosphate_mg_l": phosphate.round(3),
        "chlorophyll_ug_l": chlorophyll.round(1),
        "rainfall_24h_mm": rainfall.round(1),
        "e_coli_cfu_100ml": e_coli.round(0),
        "bank_erosion_score": erosion,
        "invertebrate_class": invertebrates,
    })


if __name__ == "__main__":
    OUTPUT.parent.mkdir(parents=True, exist_ok=True)
    make_survey().to_csv(OUTPUT, index=False, lineterminator="\n")
    print(f"wrote {OUTPUT}")
