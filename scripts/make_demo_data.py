"""Generate the bundled demo: an invented river-monitoring survey, rerun monthly.

The Quillmere Catchment Trust and its stations are fictional. Values are drawn
from a fixed seed so the tables, and so the demo reports, are reproducible:

    python scripts/make_demo_data.py  # rewrites the tables and the two earlier specs in reportgen/demo/

Seven stations are sampled once a month for twelve survey months. Survey month 1
is December 2025 and month 12 is November 2026 (month m is calendar month
``(m + 10) % 12 + 1``, in 2025 for m = 1 and in 2026 otherwise).

The demo is a monthly rerun scenario with three runs, each at the end of a month:

- ``quillmere_survey_2026-09.csv``, report date 2026-09-30: survey months 1 to 10;
- ``quillmere_survey_2026-10.csv``, report date 2026-10-31: survey months 1 to 11;
- ``quillmere_survey.csv``, report date 2026-11-30: all twelve months (the default demo).

Rows are ordered by survey month, then station, and every table is written by the same
writer, so each earlier file's bytes are an exact prefix of the next one's: a month's
run sees the rows that existed then. The specs of the two earlier runs are generated
from the November spec's text (only the report date, the data file and the subtitle
differ), so the three never drift apart.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 20261130
STATIONS = ("QC-01 Upper Weir", "QC-02 Mill Leat", "QC-03 Ferny Bend", "QC-04 Old Ford",
            "QC-05 Reed Flats", "QC-06 Lock Gate", "QC-07 Estuary Mouth")
MONTHS = 12
FIRST_MONTH = dt.date(2025, 12, 1)  # survey month 1
DEMO_DIR = Path(__file__).resolve().parents[1] / "reportgen" / "demo"
NOVEMBER_SPEC = DEMO_DIR / "quillmere_spec.toml"
OUTPUT = DEMO_DIR / "quillmere_survey.csv"

# Rainfall (mm) and E. coli (cfu/100 mL) of the two visits that came straight after storms.
STORMS = (("QC-04 Old Ford", 4, 58.0, 2900.0), ("QC-06 Lock Gate", 5, 64.0, 3400.0))
# Noise of the November (last month's) survey scores around the reach's condition; the other months have 0.6.
NOVEMBER_SCORE_NOISE = 0.3


@dataclass(frozen=True)
class MonthlyRun:
    """One run of the scenario: the rows available at its report date, and its files."""

    last_month: int  # the survey month of the newest rows in this run
    report_date: dt.date
    data_file: str
    spec_file: str


RUNS = (
    MonthlyRun(10, dt.date(2026, 9, 30), "quillmere_survey_2026-09.csv", "quillmere_spec_2026-09.toml"),
    MonthlyRun(11, dt.date(2026, 10, 31), "quillmere_survey_2026-10.csv", "quillmere_spec_2026-10.toml"),
    MonthlyRun(12, dt.date(2026, 11, 30), "quillmere_survey.csv", "quillmere_spec.toml"),
)


def calendar_month(month: int) -> dt.date:
    """The first day of survey month ``month`` (1 = December 2025)."""
    index = FIRST_MONTH.year * 12 + FIRST_MONTH.month - 1 + month - 1
    return dt.date(index // 12, index % 12 + 1, 1)


def period_subtitle(last_month: int) -> str:
    """The report subtitle naming the survey period up to ``last_month``."""
    first, last = calendar_month(1), calendar_month(last_month)
    return f"Monthly grab samples at seven stations, {first:%B %Y} to {last:%B %Y}"


def make_survey(seed: int = SEED) -> pd.DataFrame:
    """The whole survey year, rows ordered by survey month, then station."""
    rng = np.random.default_rng(seed)
    rows = len(STATIONS) * MONTHS
    # Values are drawn station by station (the order the table once had), so the seed gives the values it
    # always gave; the rows are put in month order at the end.
    station = np.repeat(STATIONS, MONTHS)
    month = np.tile(np.arange(1, MONTHS + 1), len(STATIONS))
    season = np.cos(2 * np.pi * (month - 7) / 12)  # +1 in month 7 (June 2026), -1 in month 1 (December 2025)

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
    for name, storm_month, rain, count in STORMS:
        storm_row = STATIONS.index(name) * MONTHS + storm_month - 1
        rainfall[storm_row] = rain
        e_coli[storm_row] = count

    # Two survey scores on ordinal scales with heavy ties: bank erosion (0 = none to 4 = severe) and the
    # invertebrate class (1 = poor to 5 = excellent), linked through one latent condition of the reach.
    condition = rng.normal(size=rows)
    erosion_noise = rng.normal(0, 0.6, rows)
    invertebrate_noise = rng.normal(0, 0.6, rows)

    # The monthly scenario's change, drawn last so every value above stays as it was: the November survey
    # (month 12) scored the banks after the autumn spate had laid erosion bare, so both scores follow the
    # reach's condition more closely that month. Those seven rows carry the pair across the spec's
    # "strong_negative" rule between the October and the November run.
    november = month == MONTHS
    erosion_noise[november] = rng.normal(0, NOVEMBER_SCORE_NOISE, int(november.sum()))
    invertebrate_noise[november] = rng.normal(0, NOVEMBER_SCORE_NOISE, int(november.sum()))
    erosion = np.digitize(-0.8 * condition + erosion_noise, [-1.2, -0.3, 0.5, 1.3])
    invertebrates = 1 + np.digitize(0.8 * condition + invertebrate_noise, [-1.0, -0.2, 0.6, 1.4])

    # Drawn after everything above, so the earlier columns stay as they were.
    # A planted Simpson's paradox: discharge and ammonium. Downstream stations carry both more water and more
    # ammonium (treated effluent joins below QC-03), so across stations the two rise together; at any one
    # station a higher flow dilutes the ammonium, so within every station they fall together.
    reach = np.repeat(np.arange(len(STATIONS)), MONTHS)  # 0 = the upper weir ... 6 = the estuary mouth
    flow_anomaly = rng.normal(0, 1, rows)
    discharge = np.exp(np.log(0.4 + 0.55 * reach) + 0.25 * flow_anomaly)
    ammonium = (0.04 + 0.035 * reach) * np.exp(-0.22 * flow_anomaly + rng.normal(0, 0.2, rows))

    # A raw correlation that the water temperature explains: filamentous algae and midge larvae both thrive
    # in warm water and have nothing else to do with each other here.
    algae_cover = np.clip(4.0 + 2.2 * temperature + rng.normal(0, 3.0, rows), 0.0, 100.0)
    midge_larvae = 30.0 + 11.0 * temperature + rng.normal(0, 16.0, rows)

    survey = pd.DataFrame({
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
        "discharge_m3_s": discharge.round(3),
        "ammonium_mg_l": ammonium.round(4),
        "filamentous_algae_pct": algae_cover.round(1),
        "midge_larvae_per_m2": midge_larvae.round(0),
    })
    order = np.lexsort((np.repeat(np.arange(len(STATIONS)), MONTHS), month))  # month first, then station
    return survey.iloc[order].reset_index(drop=True)


def survey_csv(survey: pd.DataFrame) -> str:
    """The one writer of every table: a header, then one line per row, each ending in a newline."""
    return survey.to_csv(index=False, lineterminator="\n")


def _replace_once(text: str, old: str, new: str) -> str:
    # The earlier specs are edits of the November text; a line that moved or changed must stop the script,
    # not leave a spec that silently names November's date or file.
    if text.count(old) != 1:
        raise SystemExit(f"{NOVEMBER_SPEC}: expected the line {old!r} exactly once; update scripts/make_demo_data.py")
    return text.replace(old, new)


def monthly_spec(november_text: str, run: MonthlyRun) -> str:
    """The spec of an earlier run: the November spec with its date, data file and subtitle changed."""
    november = RUNS[-1]
    text = _replace_once(november_text, "# This file is the November run.",
                         f"# This file is the {run.report_date:%B} run, written from quillmere_spec.toml by\n"
                         "# scripts/make_demo_data.py: edit that file and rerun the script, never this one.")
    text = _replace_once(text, f"date = {november.report_date.isoformat()}\n",
                         f"date = {run.report_date.isoformat()}\n")
    text = _replace_once(text, f'path = "{november.data_file}"\n', f'path = "{run.data_file}"\n')
    return _replace_once(text, f'subtitle = "{period_subtitle(november.last_month)}"\n',
                         f'subtitle = "{period_subtitle(run.last_month)}"\n')


def monthly_files(survey: pd.DataFrame, november_text: str) -> dict[str, str]:
    """Every generated file's name in reportgen/demo/ and its text."""
    files: dict[str, str] = {}
    previous = ""
    for run in RUNS:
        table = survey_csv(survey[survey["month"] <= run.last_month])
        # Each month's run must see last month's rows unchanged, byte for byte.
        if not table.startswith(previous) or not table.endswith("\n"):
            raise SystemExit(f"{run.data_file}: the previous month's table is not a prefix of this one")
        previous = table
        files[run.data_file] = table
        if run is not RUNS[-1]:
            files[run.spec_file] = monthly_spec(november_text, run)
    return files


def main() -> None:
    DEMO_DIR.mkdir(parents=True, exist_ok=True)
    files = monthly_files(make_survey(), NOVEMBER_SPEC.read_text(encoding="utf-8"))
    for name, text in files.items():
        (DEMO_DIR / name).write_bytes(text.encode("utf-8"))
        print(f"wrote {DEMO_DIR / name}")


if __name__ == "__main__":
    main()
