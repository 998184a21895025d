"""Every bad spec or data file gets our own one-line error, through the command line.

Each test feeds one kind of bad input to ``reportgen check`` (and a few to
``reportgen run``) and checks the contract of DEVELOPERS.md: exit code 2, one
line ``reportgen: error: <message>`` on stderr and nothing on stdout, no
traceback, the message names the file and the key path or column (and row),
and says what would fix it; ``run`` creates or changes no output folder.
Broken files that are awkward to write inline live in ``tests/bad_inputs/``.
docs/bad-input.md lists the messages these tests produce.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner, Result

from reportgen.cli import main
from tests.conftest import write_spec

BAD = Path(__file__).parent / "bad_inputs"
PAIR_AB = """
[[pairs]]
x = "a"
y = "b"
"""
GOOD = pd.DataFrame({"alpha": [1.2, 2.4, 3.1, 4.8, 5.0, 6.3], "b": [2.0, 1.1, 3.9, 3.2, 6.1, 5.5],
                     "c": [0.3, 0.1, 0.7, 0.2, 0.9, 0.4]})
PAIR_ALPHA_B = PAIR_AB.replace('"a"', '"alpha"')


def invoke(*args: str | Path) -> Result:
    return CliRunner().invoke(main, [str(a) for a in args])


def refused(*args: str | Path) -> str:
    """The one error line of a refused command, after checking the exit code and the streams."""
    result = invoke(*args)
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception)
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    assert result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("reportgen: error: ")
    return lines[0].removeprefix("reportgen: error: ")


def check_refuses(spec: Path, *expected: str) -> str:
    """``reportgen check SPEC`` is refused with a message that names the spec or data file and ``expected``."""
    message = refused("check", spec)
    assert message.startswith(str(spec.parent)), message
    for text in expected:
        assert text in message, f"{text!r} not in {message!r}"
    return message


def run_refuses(spec: Path, *expected: str) -> str:
    """``reportgen run SPEC --out DIR`` is refused the same way and DIR is never created."""
    out = spec.parent / "report_out"
    message = refused("run", spec, "--out", out)
    for text in expected:
        assert text in message, f"{text!r} not in {message!r}"
    assert not out.exists()
    assert not list(spec.parent.glob(".report_out*")), "a staging folder was left behind"
    return message


def accepted(spec: Path) -> str:
    result = invoke("check", spec)
    assert result.exit_code == 0, result.output
    return result.stdout


def project(tmp_path: Path, body: str = PAIR_ALPHA_B, *, data: pd.DataFrame | None = GOOD,
            bad_file: str = "", data_name: str = "data.csv", quick: bool = True) -> Path:
    """A spec in ``tmp_path`` with ``body``, and its data: ``data`` as CSV or a copy of ``bad_inputs/bad_file``."""
    if bad_file:
        data_name = bad_file
        shutil.copyfile(BAD / bad_file, tmp_path / bad_file)
    elif data is not None:
        data.to_csv(tmp_path / data_name, index=False)
    return write_spec(tmp_path, body, data_name=data_name, quick=quick)


def spec_file(tmp_path: Path, name: str) -> Path:
    """A spec kept in bad_inputs, copied next to good data."""
    GOOD.rename(columns={"alpha": "a"}).to_csv(tmp_path / "data.csv", index=False)
    shutil.copyfile(BAD / name, tmp_path / "spec.toml")
    return tmp_path / "spec.toml"


# ---------------------------------------------------------------------- the spec


def test_spec_that_is_not_toml(tmp_path: Path) -> None:
    check_refuses(spec_file(tmp_path, "not_toml.toml"), "spec.toml: not valid TOML", "line 4", "check quotes")


def test_spec_that_is_not_utf8(tmp_path: Path) -> None:
    check_refuses(spec_file(tmp_path, "spec_cp1252.toml"), "spec.toml: the spec must be UTF-8", "line 2",
                  "0xE9", "re-save the file as UTF-8")


def test_spec_with_a_utf8_bom_is_read(tmp_path: Path) -> None:
    spec = project(tmp_path)
    spec.write_bytes(b"\xef\xbb\xbf" + spec.read_bytes())
    assert "spec and data are valid" in accepted(spec)


@pytest.mark.parametrize(("table", "key", "fix"), [
    ('[sampler]\ndraws = "many"\n', "`sampler.draws`", "should be a whole number, got 'many'"),
    ("[sampler]\ndraws = 1000.5\n", "`sampler.draws`", "without a decimal point"),
    ("[sampler]\nchains = true\n", "`sampler.chains`", "should be a number, not true"),
    ('[summary]\ncredible_mass = "95%"\n', "`summary.credible_mass`", "should be a number"),
    ("[variables.alpha]\nlabel = 3\n", "`variables.alpha.label`", "should be text in double quotes, got 3"),
    ('[data2]\n', "unknown key `data2`", "did you mean `data`?"),
    ('[[pair_sets]]\nname = "s"\ncolumns = "alpha"\n', "`pair_sets[0].columns`", "should be a list"),
    ("[priors]\nrho = 0.5\n", "`priors.rho`", "should be a table of keys"),
    ('[priors.means]\nunits = "data"\nlocation = nan\n', "`priors.means.location`", "finite number"),
    ('[priors.rho]\nfamily = "Beta"\na = 2\n', "`priors.rho.family`", "did you mean 'beta'?"),
    ('[[rules]]\nname = "Strong Link"\nstatement = "above"\nthreshold = 0.5\n', "`rules[0].name`",
     "lower-case letters"),
], ids=["text-for-int", "float-for-int", "bool-for-number", "text-for-float", "number-for-text", "table-typo",
        "scalar-for-list", "scalar-for-table", "nan", "literal-case", "rule-name"])
def test_spec_with_wrong_types(tmp_path: Path, table: str, key: str, fix: str) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B + table, quick=False), "spec.toml:", key, fix)


@pytest.mark.parametrize(("table", "key", "suggestion"), [
    ("[summary]\ncredible_mas = 0.9\n", "`summary.credible_mas`", "did you mean `credible_mass`?"),
    ("[sampelr]\ndraws = 10\n", "`sampelr`", "did you mean `sampler`?"),
    ('[priors.rho]\nfamly = "beta"\n', "`priors.rho.famly`", "did you mean `family`?"),
    ('[variables.alpha]\nlabl = "Alpha"\n', "`variables.alpha.labl`", "did you mean `label`?"),
    ('[[pairs]]\nx = "alpha"\ny = "c"\nlable = "x"\n', "`pairs[1].lable`", "did you mean `label`?"),
    ('[report.extra]\nkey = 1\n', "`report.extra`", "valid keys here: title, subtitle"),
    ('[diagnostics]\n"r hat" = 1.1\n', '`diagnostics."r hat"`', "did you mean `rhat_max`?"),
], ids=["table-key", "top-level", "prior-key", "variable-key", "pair-key", "no-close-match", "quoted-key"])
def test_spec_with_unknown_keys_suggests_the_right_one(tmp_path: Path, table: str, key: str, suggestion: str) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B + table, quick=False), "unknown key", key, suggestion)


def test_spec_naming_a_column_that_is_not_in_the_data(tmp_path: Path) -> None:
    message = check_refuses(project(tmp_path, PAIR_ALPHA_B.replace('"alpha"', '"alpah"')),
                            "data.csv: column `alpah`", "pairs[0].x", "close matches: alpha",
                            "Columns are: alpha, b, c")
    assert "is not in the data" in message


def test_spec_pair_set_naming_a_column_that_is_not_in_the_data(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, '[[pair_sets]]\nname = "all"\ncolumns = ["alpha", "b", "cc"]\n'),
                  "column `cc`", "pair_sets[0].columns", "close matches: c")


def test_spec_variables_naming_a_column_that_is_not_in_the_data(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B + '[variables.aplha]\nlabel = "Alpha"\n'),
                  "column `aplha`", "variables.aplha", "close matches: alpha")


def test_spec_data_columns_leaving_out_a_paired_column(tmp_path: Path) -> None:
    body = PAIR_ALPHA_B.replace("[[pairs]]", 'columns = ["alpha", "c"]\n\n[[pairs]]')
    check_refuses(project(tmp_path, body), "column `b`", "pairs[0].y", "not among data.columns",
                  "add it to data.columns")


def test_spec_data_columns_listing_a_column_twice(tmp_path: Path) -> None:
    body = PAIR_ALPHA_B.replace("[[pairs]]", 'columns = ["alpha", "b", "alpha"]\n\n[[pairs]]')
    check_refuses(project(tmp_path, body), "`data.columns`: lists `alpha` more than once")


def test_spec_pairing_a_column_with_itself(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B.replace('"b"', '"alpha"')), "spec.toml: `pairs[0]`",
                  "got `alpha` as both x and y", "change one of them")


def test_spec_listing_a_pair_twice(tmp_path: Path) -> None:
    body = PAIR_ALPHA_B + '[[pairs]]\nx = "b"\ny = "alpha"\n'
    check_refuses(project(tmp_path, body), "spec.toml: `pairs[1]`", "already listed at `pairs[0]`",
                  "remove one of them")


def test_spec_pair_set_may_hold_a_listed_pair(tmp_path: Path) -> None:
    """A listed pair inside a pair set is fitted once, with its own settings; the set's matrix shows it."""
    body = PAIR_ALPHA_B + '[[pair_sets]]\nname = "trio"\ncolumns = ["c", "b", "alpha"]\n'
    result = invoke("check", project(tmp_path, body))
    assert result.exit_code == 0, result.output
    assert "3 pair" in result.output


@pytest.mark.parametrize(("table", "key", "fix"), [
    ("[priors.sds]\nscale = -2\n", "`priors.sds.scale`", "should be greater than 0"),
    ("[priors.means]\nscale = 0\n", "`priors.means.scale`", "should be greater than 0"),
    ('[priors.sds]\nfamily = "half_student_t"\nnu = -1\n', "`priors.sds.nu`", "should be greater than 0"),
    ('[priors.rho]\nfamily = "beta"\na = 0\nb = 2\n', "`priors.rho.a`", "should be greater than 0 and at most"),
    ('[priors.rho]\nfamily = "beta"\na = 2\nb = -1\n', "`priors.rho.b`", "should be greater than 0"),
    ('[priors.rho]\nfamily = "uniform"\na = 3\n', "`priors.rho`", 'use family = "beta"'),
    ('[pairs.priors.rho]\nfamily = "beta"\na = -0.5\nb = 1\n', "`pairs[0].priors.rho.a`", "greater than 0"),
], ids=["sd-scale", "mean-scale", "student-nu", "beta-a", "beta-b", "uniform-with-shape", "pair-override"])
def test_spec_priors_with_impossible_parameters(tmp_path: Path, table: str, key: str, fix: str) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B + table), "spec.toml:", key, fix)


@pytest.mark.parametrize(("rule", "key"), [
    ('statement = "above"\nthreshold = 1.5', "`rules[0].threshold`"),
    ('statement = "below"\nthreshold = -1.01', "`rules[0].threshold`"),
    ('statement = "between"\nlower = -2\nupper = 0.5', "`rules[0].lower`"),
    ('statement = "between"\nlower = 0\nupper = 3', "`rules[0].upper`"),
], ids=["above", "below", "lower", "upper"])
def test_spec_thresholds_outside_minus_one_to_one(tmp_path: Path, rule: str, key: str) -> None:
    body = PAIR_ALPHA_B + f'[[rules]]\nname = "r"\n{rule}\n'
    check_refuses(project(tmp_path, body), key, "should be at least -1 and at most 1")


def test_spec_rope_outside_its_range(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B + "[rope]\nlower = 0.2\n"), "`rope.lower`",
                  "should be at least -1 and at most 0, got 0.2")


@pytest.mark.parametrize("value", ["1.0", "0", "1.5", "-0.2"])
def test_spec_required_probability_outside_zero_one(tmp_path: Path, value: str) -> None:
    rule = f'name = "r"\nstatement = "above"\nthreshold = 0.3\nrequired_probability = {value}\n'
    body = PAIR_ALPHA_B + "[[rules]]\n" + rule
    check_refuses(project(tmp_path, body), "`rules[0].required_probability`",
                  "should be greater than 0 and less than 1", f"got {value}")


@pytest.mark.parametrize("value", ["1.2", "0", "1", "-0.5"])
def test_spec_credible_mass_outside_zero_one(tmp_path: Path, value: str) -> None:
    check_refuses(project(tmp_path, PAIR_ALPHA_B + f"[summary]\ncredible_mass = {value}\n"),
                  "`summary.credible_mass`", "should be greater than 0 and less than 1", f"got {value}")


@pytest.mark.parametrize(("key", "value", "limit"), [
    ("draws", "0", "at most 200000"), ("tune", "0", "at most 200000"), ("chains", "0", "at most 64"),
    ("draws", "-5", "at most 200000"), ("draws", "1000000000", "at most 200000"), ("chains", "10000", "at most 64"),
    ("tune", "99999999999999999999", "at most 200000"),
])
def test_spec_sampler_settings_below_one_or_absurdly_large(tmp_path: Path, key: str, value: str, limit: str) -> None:
    spec = project(tmp_path, PAIR_ALPHA_B + f"[sampler]\n{key} = {value}\n", quick=False)
    minimum = 2 if key == "chains" else 20  # what R-hat, ESS and E-BFMI need (spec.SAMPLER_MINIMUM_REASONS)
    check_refuses(spec, f"`sampler.{key}`", f"should be at least {minimum} and {limit}", f"got {value}")


@pytest.mark.parametrize(("option", "value"), [("--draws", "0"), ("--chains", "65"), ("--tune", "-1")])
def test_command_line_sampler_overrides_out_of_range(tmp_path: Path, option: str, value: str) -> None:
    spec = project(tmp_path)
    out = tmp_path / "out"
    message = refused("run", spec, "--out", out, option, value)
    minimum = 2 if option == "--chains" else 20
    assert message.startswith(f"{option}: should be at least {minimum}") and f"got {value}" in message
    assert not out.exists()


def test_spec_whose_data_path_does_not_exist(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, data=None, data_name="survey.csv"), "survey.csv: data file not found",
                  "data.path = 'survey.csv'", "correct data.path")


def test_spec_whose_data_path_is_a_folder(tmp_path: Path) -> None:
    (tmp_path / "exports").mkdir()
    check_refuses(project(tmp_path, data=None, data_name="exports"), "exports: is a folder",
                  "data.path must name a CSV, Excel or Parquet file")


@pytest.mark.parametrize(("path", "expected"), [
    ("\\u0000data.csv", ("`data.path`", "control character U+0000", "remove it")),
    ("x" * 300 + ".csv", ("cannot be used as a file path", "File name too long", "correct it")),
], ids=["nul", "too-long"])
def test_spec_whose_data_path_cannot_be_a_path(tmp_path: Path, path: str, expected: tuple[str, ...]) -> None:
    check_refuses(project(tmp_path, data=None, data_name=path), "spec.toml:", *expected)


def test_spec_without_pairs_or_report(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, ""), "spec.toml: the spec lists no pairs", "add a [[pairs]] table")
    spec = tmp_path / "spec.toml"
    spec.write_text('[data]\npath = "data.csv"\n' + PAIR_ALPHA_B, encoding="utf-8")
    check_refuses(spec, "the [report] table is required but missing; add it")


def test_spec_nested_too_deeply(tmp_path: Path) -> None:
    spec = project(tmp_path)
    spec.write_text(spec.read_text() + "junk = " + "[" * 3000 + "]" * 3000 + "\n", encoding="utf-8")
    check_refuses(spec, "nested too deeply")


def test_names_with_line_breaks_stay_on_one_line(tmp_path: Path) -> None:
    message = check_refuses(project(tmp_path, PAIR_ALPHA_B.replace('"alpha"', '"al\\npha"')), "column `al\\npha`")
    assert "\n" not in message


# ---------------------------------------------------------------------- the data


def test_data_file_that_is_empty(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="empty.csv"), "empty.csv: the file is empty",
                  "needs a header row and data rows")


def test_data_file_with_a_header_only(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="header_only.csv"), "header_only.csv:",
                  "has a header but no data rows", "add the data below the header")


@pytest.mark.parametrize("name", ["semicolon.csv", "tab.tsv"])
def test_data_file_with_semicolons_or_tabs_is_read(tmp_path: Path, name: str) -> None:
    output = accepted(project(tmp_path, PAIR_AB, bad_file=name))
    assert "a vs b: n = 5" in output


def test_data_file_with_decimal_commas(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="semicolon_decimal_comma.csv"), "column `a`",
                  "row 2 ('1,2')", "numbers written with a comma; use a decimal point")


def test_data_file_whose_header_has_a_quoted_delimiter(tmp_path: Path) -> None:
    (tmp_path / "data.csv").write_text('"x, mm";"y, mm"\n1;2\n2;1\n3;4\n4;3\n5;6\n', encoding="utf-8")
    spec = write_spec(tmp_path, '[[pairs]]\nx = "x, mm"\ny = "y, mm"\n')
    assert "x, mm vs y, mm: n = 5" in accepted(spec)


@pytest.mark.parametrize(("name", "expected"), [
    ("ragged.csv", ("line 3 has 3 comma-separated fields but the header (line 1) has 2",
                    "give every row the same number of fields")),
    ("short_row.csv", ("line 3 has 1 comma-separated field but the header (line 1) has 2",)),
    ("unclosed_quote.csv", ("line 3 opens a double quote that is never closed",)),
], ids=["extra-field", "missing-field", "unclosed-quote"])
def test_data_file_with_inconsistent_field_counts(tmp_path: Path, name: str, expected: tuple[str, ...]) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file=name), name, *expected)


def test_data_file_with_trailing_delimiters_keeps_its_columns(tmp_path: Path) -> None:
    """Every row ending in a comma once made pandas take column a as the index and shift the rest."""
    output = accepted(project(tmp_path, PAIR_AB, bad_file="trailing_delimiters.csv"))
    assert "a vs b: n = 5" in output


@pytest.mark.parametrize(("name", "encoding"), [("cp1252.csv", "cp1252"), ("utf16.txt", "utf-16"),
                                                ("bom.csv", "utf-8-sig")])
def test_data_file_in_another_encoding_is_read_and_says_which(tmp_path: Path, name: str, encoding: str) -> None:
    output = accepted(project(tmp_path, PAIR_AB, bad_file=name))
    assert f"read as {encoding}" in output.splitlines()[0] and "a vs b: n = 5" in output


def test_data_file_with_a_bom_has_clean_column_names(tmp_path: Path) -> None:
    """The BOM must not stick to the first column's name (it would not match `a`)."""
    assert "a vs b: n = 5" in accepted(project(tmp_path, PAIR_AB, bad_file="bom.csv"))


def test_data_file_mixing_encodings(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="mixed_encoding.csv"), "mixes text encodings",
                  "line 7", "0xE9", "re-save the whole file as UTF-8")


def test_data_file_that_is_binary(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="binary.csv"), "does not look like a CSV text file",
                  "set data.format")


def write_workbook(path: Path, sheets: dict[str, pd.DataFrame]) -> None:
    with pd.ExcelWriter(path) as writer:
        for name, frame in sheets.items():
            frame.to_excel(writer, sheet_name=name, index=False)


def test_excel_with_several_sheets_and_no_sheet_named(tmp_path: Path) -> None:
    write_workbook(tmp_path / "book.xlsx", {"Notes": GOOD.head(1), "Survey 2026": GOOD, "Old": GOOD})
    check_refuses(project(tmp_path, data=None, data_name="book.xlsx"), "book.xlsx: the workbook has 3 sheets",
                  "`Notes`, `Survey 2026`, `Old`", "name the one to use with data.sheet", 'sheet = "Notes"')


def test_excel_sheet_that_does_not_exist(tmp_path: Path) -> None:
    write_workbook(tmp_path / "book.xlsx", {"Notes": GOOD.head(1), "Survey 2026": GOOD})
    body = 'sheet = "survey 2026"\n' + PAIR_ALPHA_B
    check_refuses(project(tmp_path, body, data=None, data_name="book.xlsx"), "no sheet named `survey 2026`",
                  "the sheets are: `Notes`, `Survey 2026`", "Did you mean `Survey 2026`?")


def test_excel_named_sheet_is_read(tmp_path: Path) -> None:
    write_workbook(tmp_path / "book.xlsx", {"Notes": GOOD.head(1), "Survey 2026": GOOD})
    body = 'sheet = "Survey 2026"\n' + PAIR_ALPHA_B
    assert "alpha vs b: n = 6" in accepted(project(tmp_path, body, data=None, data_name="book.xlsx"))


def test_excel_with_a_title_row_above_the_header(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    sheet = book.active
    sheet.append(["River survey 2026"])
    sheet.append([])
    sheet.append(["alpha", "b", "c"])
    for row in GOOD.itertuples(index=False):
        sheet.append(list(row))
    book.save(tmp_path / "book.xlsx")
    check_refuses(project(tmp_path, data=None, data_name="book.xlsx"), "column `alpha` (named in pairs[0].x)",
                  "remove any title rows above it", "Columns are: River survey 2026, Unnamed: 1, Unnamed: 2")


def test_sheet_named_for_a_csv_file(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, 'sheet = "Survey"\n' + PAIR_ALPHA_B), "data.sheet = 'Survey' is set",
                  "read as csv", "remove data.sheet")


def test_excel_with_duplicated_header_names(tmp_path: Path) -> None:
    """pandas would rename the second `b` to `b.1` and carry on; the user must hear about it."""
    frame = pd.DataFrame([[1.0, 2.0, 3.0]] * 5, columns=["alpha", "b", "b"])
    frame.to_excel(tmp_path / "book.xlsx", index=False)
    check_refuses(project(tmp_path, data=None, data_name="book.xlsx"), "the column name `b` appears more than once",
                  "row 1 of sheet `Sheet1`, columns 2 and 3", "rename one")


def test_data_with_text_in_a_numeric_column(tmp_path: Path) -> None:
    message = check_refuses(project(tmp_path, PAIR_AB, bad_file="text_in_numbers.csv"), "column `a`",
                            "non-numeric values at row 4 ('x7')", "fix or blank those cells")
    assert "n/a?" not in message  # column b's bad cell comes once a is fixed


def test_data_with_many_bad_cells_lists_the_first_three(tmp_path: Path) -> None:
    frame = pd.DataFrame({"alpha": ["1", "two", "3", "four", "five", "six"], "b": GOOD.b})
    check_refuses(project(tmp_path, data=frame), "column `alpha` has non-numeric values at row 3 ('two'), "
                  "row 5 ('four'), row 6 ('five') and 1 more")


@pytest.mark.parametrize("cell", ["inf", "-Infinity", "1e400"])
def test_data_with_infinities(tmp_path: Path, cell: str) -> None:
    (tmp_path / "data.csv").write_text(f"a,b\n1.2,2.0\n2.4,{cell}\n3.1,3.9\n4.8,3.2\n5.0,6.1\n", encoding="utf-8")
    check_refuses(write_spec(tmp_path, PAIR_AB), "column `b`", f"infinite or out-of-range value at row 3 ('{cell}')",
                  "replace it with a finite number or leave it blank")


def test_data_with_an_all_missing_column(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="all_missing.csv"), "column `b` is empty",
                  "all 5 of its cells are blank or missing", "fill it in or pair another column")


def test_data_with_a_constant_column(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="constant.csv"), "pair (`a`, `b`): column `b` is constant",
                  "7 in every complete row", "choose another column")


def test_data_with_fewer_than_four_complete_rows(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="three_rows.csv"), "pair (`a`, `b`) has only 3 complete rows",
                  "`a` has 4 values and `b` 3", "at least 4 are needed", "add rows or fill the gaps")


def test_data_with_missing_values_and_missing_fail(tmp_path: Path) -> None:
    body = PAIR_AB.replace("[[pairs]]", 'missing = "fail"\n\n[[pairs]]')
    check_refuses(project(tmp_path, body, bad_file="three_rows.csv"), "has 1 row with a missing value",
                  "first at row 4", 'set data.missing = "listwise"')


def test_data_with_duplicated_column_names(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="duplicate_header.csv"),
                  "the column name `a` appears more than once in the header (line 1, columns 1 and 3)", "rename one")


def test_data_with_perfectly_correlated_columns(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="perfectly_correlated.csv"), "perfectly correlated",
                  "sample r = +1.000000", "exact linear function", "pair other columns")


def test_data_with_values_too_large_to_square(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="huge_values.csv"), "column `a` has values too large",
                  "1e+200", "rescale it")


def test_parquet_file_that_is_corrupt(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="corrupt.parquet"), "corrupt.parquet: not a readable Parquet "
                  "file", "export it again")


def test_excel_file_that_is_corrupt(tmp_path: Path) -> None:
    check_refuses(project(tmp_path, PAIR_AB, bad_file="corrupt.xlsx"), "corrupt.xlsx: not a readable Excel "
                  "workbook", "re-save it")


def test_csv_declared_as_parquet(tmp_path: Path) -> None:
    body = 'format = "parquet"\n' + PAIR_ALPHA_B
    check_refuses(project(tmp_path, body), "data.csv: not a readable Parquet file", "set data.format")


# ----------------------------------------------------------- run: nothing written


@pytest.mark.parametrize(("body", "bad_file", "expected"), [
    (PAIR_ALPHA_B + "[summary]\ncredible_mass = 1.2\n", "", ("`summary.credible_mass`",)),
    (PAIR_ALPHA_B.replace('"b"', '"bee"'), "", ("column `bee`", "pairs[0].y")),
    (PAIR_AB, "text_in_numbers.csv", ("column `a`", "row 4 ('x7')")),
    (PAIR_AB, "ragged.csv", ("line 3 has 3 comma-separated fields",)),
    (PAIR_AB, "all_missing.csv", ("column `b` is empty",)),
], ids=["spec-range", "missing-column", "text-cell", "ragged", "empty-column"])
def test_run_refuses_before_writing_anything(tmp_path: Path, body: str, bad_file: str,
                                             expected: tuple[str, ...]) -> None:
    run_refuses(project(tmp_path, body, bad_file=bad_file), *expected)


def test_run_leaves_an_existing_output_folder_untouched(tmp_path: Path) -> None:
    out = tmp_path / "report_out"
    out.mkdir()
    (out / "report.html").write_text("last month's report", encoding="utf-8")
    spec = project(tmp_path, PAIR_AB, bad_file="constant.csv")
    message = refused("run", spec, "--out", out)
    assert "column `b` is constant" in message
    assert [p.name for p in out.iterdir()] == ["report.html"]
    assert (out / "report.html").read_text(encoding="utf-8") == "last month's report"
