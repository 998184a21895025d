"""Limits of the spec that hostile input ran into (issue 8, items 3, 4, 6, 14 and the spec half of 7 and 10).

Each case goes through ``reportgen check`` or ``run`` (or ``load_spec``) and must end as the contract of
DEVELOPERS.md says: exit 2, one line ``reportgen: error: <message>`` naming the key or path and the fix,
no traceback, no output folder. The helpers come from tests/test_bad_input.py.
"""

from __future__ import annotations

import os
import re
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reportgen.spec import (
    FIXED_P_COLUMNS,
    MAX_COLUMN_NAME,
    MAX_LINE_TEXT,
    MAX_PARAGRAPH_TEXT,
    MAX_PATH_TEXT,
    MAX_SUBTITLE_TEXT,
    MAX_UNIT_TEXT,
    MIN_CHAINS,
    MIN_DRAWS,
    MIN_TUNE,
    RESERVED_RULE_NAMES,
    load_spec,
    with_sampler_overrides,
)
from tests.test_bad_input import GOOD, PAIR_ALPHA_B, accepted, check_refuses, invoke, project, refused

# ------------------------------------------------------------- 3: two pairs, one name


COLLIDING = pd.DataFrame({"a vs b": [1.0, 2, 3, 4, 5], "c": [2.0, 1, 4, 3, 6], "a": [3.0, 4, 1, 2, 7],
                          "b vs c": [4.0, 3, 2, 5, 1]})


@pytest.mark.parametrize(("body", "where", "other"), [
    ('[[pairs]]\nx = "a vs b"\ny = "c"\n[[pair_sets]]\nname = "g"\ncolumns = ["a", "b vs c"]\n',
     "`pair_sets[0] (g)`", "at `pairs[0]`"),
    ('[[pairs]]\nx = "a vs b"\ny = "c"\n[[pairs]]\nx = "a"\ny = "b vs c"\n', "`pairs[1]`", "at `pairs[0]`"),
], ids=["pair-and-pair-set", "two-pairs"])
def test_two_pairs_that_would_get_the_same_name_are_refused(tmp_path: Path, body: str, where: str,
                                                             other: str) -> None:
    """Keys were "a vs b vs c" twice: one draws file, one HTML id and one record entry for two pairs."""
    message = check_refuses(project(tmp_path, body, data=COLLIDING), f"spec.toml: {where}", "(a, b vs c)",
                            '"a vs b vs c"', "(a vs b, c)", other, 'rename a column whose name contains " vs "',
                            "or remove one of the two pairs")
    assert len(message) < 400


def test_distinct_pair_names_give_distinct_draws_files_and_link_targets() -> None:
    """Draws files and HTML ids derive from the pair's name; names that differ only in case, in characters a
    file name cannot hold, or after the first 100 characters must still give different files and ids
    (also on a file system that ignores case)."""
    from reportgen.report.context import _anchor
    from reportgen.runs.record import safe_file_stem

    keys = ["a vs b", "A vs b", "a b vs c", "a_b vs c", "a/b vs c", "a:b vs c", "a vs b vs c", "a vs b  vs c",
            "x" * 120 + "1 vs y", "x" * 120 + "2 vs y", "é vs b", "e vs b", "a vs b-student_t"]
    stems = [safe_file_stem(key) for key in keys]
    files = {name.lower() for stem in stems for name in (f"{stem}.nc", f"{stem}-student_t.nc")}
    assert len(files) == 2 * len(keys)
    anchors = {_anchor(key) for key in keys}
    assert len(anchors) == len(keys)
    assert all(re.fullmatch(r"[\w-]+", anchor) for anchor in anchors)


# ------------------------------------------------ 4: rules named like a fixed column


@pytest.mark.parametrize("name", sorted(RESERVED_RULE_NAMES))
def test_rule_named_like_a_fixed_results_column_is_refused(tmp_path: Path, name: str) -> None:
    """results.csv had two p_positive (p_rope, p_value) headers."""
    body = PAIR_ALPHA_B + f'[[rules]]\nname = "{name}"\nstatement = "above"\nthreshold = 0.0\n'
    check_refuses(project(tmp_path, body), f'`rules[0].name` = "{name}" is reserved',
                  f"fixed column p_{name}", f'rename the rule, for example to "{name}_rule"')


def test_the_rule_that_is_refused_is_named_by_its_place(tmp_path: Path) -> None:
    rules = "".join(f'[[rules]]\nname = "{name}"\nstatement = "above"\nthreshold = 0.1\n'
                    for name in ("strong", "weak", "value"))
    check_refuses(project(tmp_path, PAIR_ALPHA_B + rules), '`rules[2].name` = "value" is reserved')


def test_rule_name_ending_in_mcse_is_refused(tmp_path: Path) -> None:
    """Rules "strong" and "strong_mcse" would share the column p_strong_mcse once MCSE columns exist."""
    rules = "".join(f'[[rules]]\nname = "{name}"\nstatement = "above"\nthreshold = 0.1\n'
                    for name in ("strong", "strong_mcse"))
    check_refuses(project(tmp_path, PAIR_ALPHA_B + rules), '`rules[1].name` = "strong_mcse" ends in _mcse',
                  "p_<rule>_mcse", 'for example to "strong_check"')


def test_reserved_rule_names_match_the_results_header() -> None:
    """spec keeps its own list (it may not import results, which is downstream): it must match the header."""
    from reportgen.results.pair import RunResults
    from reportgen.results.table import results_rows

    rules = ("positive_rule", "rope_width", "strong")
    header, _ = results_rows(RunResults(pairs=(), credible_mass=0.95, interval_kind="central", rule_names=rules))
    fixed = header[: len(header) - 2 * len(rules)]
    assert header[len(fixed):] == [column for name in rules for column in (f"p_{name}", f"p_{name}_mcse")]
    assert {column for column in fixed if column.startswith("p_")} == set(FIXED_P_COLUMNS)
    taken = {column.removeprefix("p_").removesuffix("_mcse") for column in fixed if column.startswith("p_")}
    assert taken <= RESERVED_RULE_NAMES
    assert len(set(header)) == len(header)


# ------------------------------------------------------ 6: too few draws or chains


@pytest.mark.parametrize(("option", "value", "minimum", "why"), [
    ("--draws", "1", MIN_DRAWS, "R-hat, ESS, Monte Carlo error"), ("--draws", "2", MIN_DRAWS, "R-hat"),
    ("--draws", "5", MIN_DRAWS, "R-hat"), ("--draws", str(MIN_DRAWS - 1), MIN_DRAWS, "R-hat"),
    ("--tune", "1", MIN_TUNE, "step size is not adapted"), ("--chains", "1", MIN_CHAINS, "R-hat compares chains"),
])
def test_too_few_draws_tuning_or_chains_on_the_command_line(tmp_path: Path, option: str, value: str,
                                                            minimum: int, why: str) -> None:
    """--draws 1 divided by zero in E-BFMI; one chain with tune 1 never moved and broke the density estimate."""
    spec = project(tmp_path)
    out = tmp_path / "out"
    message = refused("run", spec, "--out", out, option, value)
    assert message.startswith(f"{option}: should be at least {minimum} and at most "), message
    assert f"got {value}: " in message and why in message
    assert not out.exists()


@pytest.mark.parametrize(("key", "value", "minimum"), [("draws", 5, MIN_DRAWS), ("tune", 1, MIN_TUNE),
                                                       ("chains", 1, MIN_CHAINS)])
def test_too_few_draws_tuning_or_chains_in_the_spec(tmp_path: Path, key: str, value: int, minimum: int) -> None:
    spec = project(tmp_path, PAIR_ALPHA_B + f"[sampler]\n{key} = {value}\n", quick=False)
    check_refuses(spec, f"`sampler.{key}`: should be at least {minimum} and at most", f"got {value}: ")


def test_the_minimum_settings_are_accepted(tmp_path: Path) -> None:
    spec = load_spec(project(tmp_path))
    quick = with_sampler_overrides(spec, draws=MIN_DRAWS, tune=MIN_TUNE, chains=MIN_CHAINS)
    assert (quick.document.sampler.draws, quick.document.sampler.chains) == (MIN_DRAWS, MIN_CHAINS)


def test_the_diagnostics_run_at_the_minimum_settings() -> None:
    """At MIN_CHAINS x MIN_DRAWS, even with each chain stuck at one value (untuned chains often are), R-hat,
    ESS, MCSE, E-BFMI and the density estimate give numbers instead of raising. ArviZ's own shape check asks
    for at least 2 chains of 4 draws (common practice: Vehtari et al. 2021 split every chain in two)."""
    from reportgen.diagnostics import diagnose
    from reportgen.spec import Diagnostics
    from reportgen.summaries import bounded_density

    rng = np.random.default_rng(8)
    moving = rng.normal(size=(MIN_CHAINS, MIN_DRAWS))
    stuck = np.repeat(rng.uniform(-0.5, 0.5, size=(MIN_CHAINS, 1)), MIN_DRAWS, axis=1)
    diagnosis = diagnose({"rho": stuck, "mu_x": moving}, np.zeros((MIN_CHAINS, MIN_DRAWS), dtype=bool),
                         rng.normal(size=(MIN_CHAINS, MIN_DRAWS)), Diagnostics())
    assert diagnosis.status == "fail"  # far too few draws to pass, but judged, not crashed
    assert all(np.isfinite([p.ess_bulk, p.ess_tail]).all() for p in diagnosis.parameters)
    grid, density = bounded_density(stuck, -1.0, 1.0)
    assert np.isfinite(density).all() and grid.size == density.size
    with pytest.raises(ZeroDivisionError):  # why one draw is not enough: E-BFMI divides by (draws - 1)
        diagnose({"rho": moving[:, :1]}, np.zeros((MIN_CHAINS, 1), dtype=bool), moving[:, :1], Diagnostics())


# ------------------------------------------------------------ 14: text length limits

LONG = "x" * 20_000


@pytest.mark.parametrize(("table", "key", "limit"), [
    (f'[report]\nsubtitle = "{LONG}"\n', "report.subtitle", MAX_SUBTITLE_TEXT),
    (f'[report]\nclient = "{LONG}"\n', "report.client", MAX_LINE_TEXT),
    (f'[report]\nauthor = "{LONG}"\n', "report.author", MAX_LINE_TEXT),
    (f'[report]\nconfidentiality = "{LONG}"\n', "report.confidentiality", MAX_PARAGRAPH_TEXT),
    (f'[report]\nlogo = "{LONG}"\n', "report.logo", MAX_PATH_TEXT),
    (f'[report]\ntemplates = "{LONG}"\n', "report.templates", MAX_PATH_TEXT),
    (f'[data]\nsheet = "{LONG}"\n', "data.sheet", MAX_LINE_TEXT),
    (f'[data]\ncolumns = ["alpha", "{LONG}"]\n', "data.columns[1]", MAX_COLUMN_NAME),
    (f'[variables.alpha]\nlabel = "{LONG}"\n', "variables.alpha.label", MAX_LINE_TEXT),
    (f'[variables.alpha]\nunit = "{LONG}"\n', "variables.alpha.unit", MAX_UNIT_TEXT),
    (f'[variables."{LONG}"]\nlabel = "x"\n', "variables", MAX_COLUMN_NAME),
    (f'[[pairs]]\nx = "{LONG}"\ny = "b"\n', "pairs[1].x", MAX_COLUMN_NAME),
    (f'[[pairs]]\nx = "alpha"\ny = "c"\nlabel = "{LONG}"\n', "pairs[1].label", MAX_LINE_TEXT),
    (f'[[pair_sets]]\nname = "{LONG}"\ncolumns = ["b", "c"]\n', "pair_sets[0].name", MAX_LINE_TEXT),
    (f'[[pair_sets]]\nname = "g"\ncolumns = ["b", "{LONG}"]\n', "pair_sets[0].columns[1]", MAX_COLUMN_NAME),
    (f'[[rules]]\nname = "r"\nstatement = "above"\nthreshold = 0.1\ndescription = "{LONG}"\n',
     "rules[0].description", MAX_PARAGRAPH_TEXT),
], ids=lambda value: value if isinstance(value, str) and len(value) < 40 else None)
def test_free_text_of_20000_characters_is_refused(tmp_path: Path, table: str, key: str, limit: int) -> None:
    """A 20,000-character subtitle ran off the page and took 9 s to lay out; 1 MB took over ten minutes."""
    spec = project(tmp_path, PAIR_ALPHA_B)
    text = spec.read_text(encoding="utf-8")
    section = table.split("\n", 1)[0]
    if section in ("[report]", "[data]"):  # add the key to the spec's own table
        text = text.replace(section + "\n", table, 1)
    else:
        text += "\n" + table
    spec.write_text(text, encoding="utf-8")
    message = check_refuses(spec, f"`{key}`", f"should have at most {limit} characters, got 20000")
    assert len(message) < 300 and "xxxxxxxxxx" not in message


def test_text_at_the_limits_is_accepted(tmp_path: Path) -> None:
    body = (PAIR_ALPHA_B.replace('y = "b"\n', f'y = "b"\nlabel = "{"L" * MAX_LINE_TEXT}"\n')
            + f'[variables.alpha]\nlabel = "{"V" * MAX_LINE_TEXT}"\nunit = "{"U" * MAX_UNIT_TEXT}"\n')
    spec = project(tmp_path, body)
    text = spec.read_text(encoding="utf-8").replace('title = "Test report"', f'title = "{"T" * MAX_LINE_TEXT}"\n'
                                                    f'subtitle = "{"S" * MAX_SUBTITLE_TEXT}"')
    spec.write_text(text, encoding="utf-8")
    assert "spec and data are valid" in accepted(spec)


def _css_rules() -> dict[str, str]:
    css = (Path(__file__).parent.parent / "templates" / "report.css").read_text(encoding="utf-8")
    css = re.sub(r"/\*.*?\*/", "", css, flags=re.S)
    rules: dict[str, str] = {}
    for selectors, body in re.findall(r"([^{}]+)\{([^{}]*)\}", css):
        for selector in selectors.rsplit(";", 1)[-1].split(","):  # a margin box follows its page's settings
            rules[" ".join(selector.split())] = rules.get(" ".join(selector.split()), "") + body
    return rules


def test_the_stylesheet_lets_long_words_break_where_user_text_stands() -> None:
    rules = _css_rules()
    for selector in ("h1", "h2", "h3", "p", "li", "dd", "figcaption", ".subtitle", ".confidential", ".banner",
                     ".note", "table.data td:first-child", "table.data td.unit", ".meta td", "table.kv td"):
        assert "overflow-wrap: anywhere" in rules.get(selector, ""), selector
    for box in ("@top-left", "@top-right"):  # the running header: one line, cut
        assert "text-overflow: ellipsis" in rules[box] and "overflow: hidden" in rules[box], box


def test_a_long_unbroken_title_stays_on_the_page(tmp_path: Path) -> None:
    """With the exact engine, a report whose title, subtitle, client and pair label are single words at their
    length limits lays out with every piece of that text inside the page's content area (WeasyPrint's own
    layout boxes; before the fix the title ran 4,600 px past the margin). The time is printed, not asserted."""
    import weasyprint
    from weasyprint.formatting_structure import boxes

    words = {"title": "W" * MAX_LINE_TEXT, "subtitle": "S" * MAX_SUBTITLE_TEXT, "client": "C" * MAX_LINE_TEXT}
    label = "L" * MAX_LINE_TEXT
    spec = project(tmp_path, PAIR_ALPHA_B.replace('y = "b"\n', f'y = "b"\nlabel = "{label}"\n'))
    text = spec.read_text(encoding="utf-8").replace('title = "Test report"', "\n".join(
        f'{key} = "{value}"' for key, value in words.items()))
    spec.write_text(text, encoding="utf-8")
    started = time.perf_counter()
    result = invoke("run", spec, "--out", tmp_path / "out", "--engine", "exact")
    print(f"exact-engine run with {MAX_LINE_TEXT}-character words: {time.perf_counter() - started:.1f} s")
    assert result.exit_code == 0, result.output
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert words["title"] in html
    pages = weasyprint.HTML(string=html).render().pages

    def text_boxes(box: object) -> list[object]:
        if isinstance(box, boxes.MarginBox):
            return []  # the running header is clipped to one line (checked in the stylesheet test)
        found = [box] if isinstance(box, boxes.TextBox) else []
        for child in getattr(box, "children", ()):
            found += text_boxes(child)
        return found

    checked = 0
    for page in pages:
        root = page._page_box
        right = root.margin_width() - root.margin_right
        for box in text_boxes(root):
            if re.search(r"([WSCL])\1{9}", box.text):
                checked += 1
                assert box.position_x + box.width <= right + 1, (box.text[:20], box.position_x + box.width, right)
    assert checked >= 8  # the long words are there, broken over several lines


# --------------------------------------- 7 and 10: the spec path is not a plain file


def _refused_spec_path(path: Path | str) -> str:
    message = refused("check", path)
    assert message.startswith(f"{path}: "), message
    assert message.endswith(("give the path of the .toml file", "give the file's own path", "check the path"))
    return message


def test_spec_path_that_is_a_symbolic_link_loop(tmp_path: Path) -> None:
    (tmp_path / "one.toml").symlink_to(tmp_path / "two.toml")
    (tmp_path / "two.toml").symlink_to(tmp_path / "one.toml")
    assert "is a symbolic link loop" in _refused_spec_path(tmp_path / "one.toml")


def test_spec_path_that_is_a_link_to_nothing(tmp_path: Path) -> None:
    (tmp_path / "spec.toml").symlink_to(tmp_path / "gone.toml")
    assert "is a symbolic link to a missing file" in _refused_spec_path(tmp_path / "spec.toml")


def test_spec_path_that_is_a_named_pipe_is_refused_without_waiting(tmp_path: Path) -> None:
    """Opening a FIFO for reading blocks until a writer comes: the check must not open it."""
    fifo = tmp_path / "spec.toml"
    os.mkfifo(fifo)
    outcome: list[str] = []
    worker = threading.Thread(target=lambda: outcome.append(_refused_spec_path(fifo)), daemon=True)
    worker.start()
    worker.join(timeout=20)
    if worker.is_alive():  # release the blocked reader so the test process can end
        os.close(os.open(fifo, os.O_WRONLY | os.O_NONBLOCK))
        pytest.fail("reportgen check waited on the named pipe")
    assert outcome and "is a named pipe (FIFO), not a file" in outcome[0]


@pytest.mark.parametrize("device", ["/dev/zero", "/dev/null"])
def test_spec_path_that_is_a_device(device: str) -> None:
    assert "is a device, not a file" in _refused_spec_path(device)


def test_spec_path_that_is_a_folder(tmp_path: Path) -> None:
    GOOD.to_csv(tmp_path / "data.csv", index=False)
    assert "is a folder, not a spec file" in _refused_spec_path(tmp_path)
