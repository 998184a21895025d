"""The starter spec written by ``reportgen init``: every default spelled out."""

from __future__ import annotations

import hashlib
import json
import re
import shlex
from collections.abc import Sequence
from pathlib import Path

from pydantic import ValidationError

from reportgen.errors import SpecError
from reportgen.spec import (
    Checks,
    Diagnostics,
    MeanPrior,
    ReportMeta,
    RhoPrior,
    Rope,
    Sampler,
    SdPrior,
    Spec,
    Summary,
    describe_problem,
    expand_pairs,
    parse_spec_text,
)


def _toml_string(value: str) -> str:
    return json.dumps(value, ensure_ascii=False)  # a JSON string is a valid TOML basic string


def starter_spec(data_path: str, pairs: list[tuple[str, str]], title: str = "Correlation report") -> str:
    rho, means, sds = RhoPrior(), MeanPrior(), SdPrior()
    rope, summary, sampler, diagnostics, checks = Rope(), Summary(), Sampler(), Diagnostics(), Checks()
    pair_tables = "\n".join(
        f"[[pairs]]\nx = {_toml_string(x)}\ny = {_toml_string(y)}\n# label = \"optional display title\"\n"
        "# model = \"rank\"  # optional: this pair's own model\n"
        for x, y in pairs
    )
    columns = sorted({c for pair in pairs for c in pair})
    variable_tables = "\n".join(
        f"[variables.{_toml_string(c)}]\nlabel = {_toml_string(c)}\nunit = \"\"\n" for c in columns
    )
    return f"""# reportgen spec. Every key below is shown with its default; edit what you need.
# Unknown keys are errors, so a typo is caught rather than ignored.

engine = "mcmc"      # mcmc: sample all five parameters | exact: rho only, by quadrature under Jeffreys' priors
model = "normal"     # normal | student_t: robust to outlying rows | rank: Kendall's tau, for ordinal or tied data
                     # | auto: normal and robust, and the model checks choose which leads

[report]
title = {_toml_string(title)}
subtitle = ""
client = ""          # who the report is for
author = ""          # who prepared it
# date = 2026-01-31  # printed on the report and used as the PDF's date; default: the day of the run
confidentiality = "Confidential: prepared for the named client only."
logo = ""            # optional PNG or JPEG, relative to this file, under 2 MB
templates = ""       # optional folder of templates that override the shipped ones
layout = "full"      # full: every figure and table, each pair from a new page | compact: pairs follow on
draft = false        # true: every page says DRAFT (--quick sets it)
# pair_pages = 30    # which pairs get a page of their own: "all" | "rules_met" | the N strongest;
                    # default: every pair up to 30 pairs, else the 30 strongest (all are in results.csv)

[data]
path = {_toml_string(data_path)}   # relative to this spec file; CSV, Excel (.xlsx) or Parquet
format = "auto"      # auto | csv | excel | parquet
sheet = ""           # Excel only: which sheet (required when there are several)
columns = []         # optional: restrict the table to these columns
missing = "listwise" # listwise: drop rows missing either value of a pair | fail: refuse any missing value
confine_to_spec_folder = false  # true: data, logo and templates must lie inside this spec's folder

# Display labels and units, one table per column (optional).
{variable_tables}
# The pairs to analyse.
{pair_tables}
# All pairs among a list of columns (optional); the report adds a matrix figure.
# [[pair_sets]]
# name = "Group name"
# columns = ["a", "b", "c"]

# Priors. Any [[pairs]] or [[pair_sets]] entry can override one with e.g. [pairs.priors.rho].
[priors.rho]
family = "{rho.family}"   # uniform on [-1, 1] | beta: (rho + 1)/2 ~ Beta(a, b)
# a = 2.0
# b = 2.0

[priors.means]
family = "{means.family}"   # normal | flat (improper; with sds.family = "jeffreys": the reference priors)
units = "{means.units}"     # scaled: Normal(sample mean, scale x sample SD) | data: Normal(location, scale)
location = {means.location}
scale = {means.scale}

[priors.sds]
family = "{sds.family}" # half_normal | half_student_t | jeffreys (p(sigma) proportional to 1/sigma)
units = "{sds.units}"     # scaled: scale x sample SD | data: scale in the data's units
scale = {sds.scale}
nu = {sds.nu}            # half_student_t only

# Decision rules: statements about rho and the posterior probability each must reach.
# statement = "above" | "below" (with threshold) or "between" (with lower and upper).
# [[rules]]
# name = "material_positive"
# statement = "above"
# threshold = 0.3
# required_probability = 0.95
# description = "a material positive association"

# The band of rho values treated as practically zero (ROPE).
[rope]
lower = {rope.lower}
upper = {rope.upper}

[summary]
credible_mass = {summary.credible_mass}
interval = "{summary.interval}"  # central (equal-tailed) | hdi (highest density)

[sampler]
draws = {sampler.draws}      # kept draws per chain
tune = {sampler.tune}       # tuning draws per chain, discarded
chains = {sampler.chains}
target_accept = {sampler.target_accept}
seed = {sampler.seed}   # master seed; each pair's seed is derived from it and the pair's columns

# How the model checks on every pair's page judge the data.
[checks]
influence_shift = {checks.influence_shift}       # flag a row whose removal alone moves the median of rho more than this
outlier_level = {checks.outlier_level}        # family-wise level of the outlier limit on Mahalanobis distances
normality_level = {checks.normality_level}      # Mardia's skewness or kurtosis test below this flags the shape
discrete_max_distinct = {checks.discrete_max_distinct}  # a column with this many distinct values or fewer is coarse
discrete_tied_share = {checks.discrete_tied_share}   # ... as is one where this share of pairs of rows is tied
predictive_level = {checks.predictive_level}     # replicated data that rarely look like the data flag the model
student_t_max_rows = {checks.student_t_max_rows}  # model = "auto": above this many rows the rank model is robust fit

# The alternative priors each pair's interval and verdicts are tried under.
[sensitivity]
rho_priors = []      # e.g. [{{family = "beta", a = 3, b = 3}}]; empty: uniform, stretched Beta(2, 2) and Beta(5, 5)
nuisance_widths = [0.5, 2.0]  # the means' and SDs' priors this many times as wide

[diagnostics]
rhat_max = {diagnostics.rhat_max}     # fail at or above
ess_min = {diagnostics.ess_min:g}        # fail below (bulk and tail)
max_divergences = {diagnostics.max_divergences}  # fail above
bfmi_min = {diagnostics.bfmi_min}      # caution below
"""


def relative_data_path(data: Path, spec_path: Path) -> str:
    import os

    return os.path.relpath(data.resolve(), spec_path.resolve().parent)


def check_title(title: str) -> None:
    """Refuse a ``--title`` the spec would refuse, naming the option rather than the spec's key."""
    try:
        ReportMeta.model_validate({"title": title})
    except ValidationError as exc:
        problem = exc.errors(include_url=False)[0]
        raise SpecError(f"--title: {describe_problem(problem, ('report', 'title'))}") from None


def starter_as_spec(text: str, output: Path) -> Spec:
    """The starter spec as if already saved at ``output``: checking it writes no file (not even a temporary)."""
    document = parse_spec_text(text, output)
    return Spec(document=document, source_path=output.resolve(),
                source_sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(), source_text=text,
                pairs=expand_pairs(document, output))


def name_the_options(message: str, pairs: Sequence[tuple[str, str]], output: Path) -> str:
    """A message about the starter spec, reworded for the ``init`` command line that made it.

    The spec's ``pairs[i]`` came from the i-th ``--pair``, and its ``variables.<column>`` tables from the
    ``--pair`` options naming that column, so the message names the option the user typed.
    """
    options = [f"--pair {shlex.quote(x)} {shlex.quote(y)}" for x, y in pairs]
    message = message.replace(str(output.resolve()), str(output))
    for column in sorted({c for pair in pairs for c in pair}, key=len, reverse=True):
        named = next(option for option, pair in zip(options, pairs, strict=True) if column in pair)
        message = message.replace(f"(named in variables.{column})", f"(named in {named})")

    def option(match: re.Match[str]) -> str:
        index = int(match.group(1))
        return options[index] if index < len(options) else match.group(0)

    return re.sub(r"pairs\[(\d+)\](?:\.[xy])?", option, message)
