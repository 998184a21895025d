"""The spec stage: validation, defaults, pair expansion, error wording."""

from __future__ import annotations

from pathlib import Path

import pytest

from reportgen.errors import SpecError
from reportgen.spec import expand_pairs, load_spec, parse_spec_text, with_sampler_overrides

MINIMAL = """
[report]
title = "T"
[data]
path = "d.csv"
[[pairs]]
x = "a"
y = "b"
"""


def parse(extra: str) -> object:
    return parse_spec_text(MINIMAL + extra, Path("spec.toml"))


def test_defaults_are_the_documented_ones() -> None:
    doc = parse("")
    assert doc.priors.rho.shapes == (1.0, 1.0)  # Uniform(-1, 1) by default
    assert doc.summary.credible_mass == 0.95
    assert doc.diagnostics.rhat_max == 1.01  # Vehtari et al. (2021), sec. 4
    assert doc.diagnostics.ess_min == 400  # Vehtari et al. (2021): 100 per chain, 4 chains
    assert (doc.sampler.draws, doc.sampler.tune, doc.sampler.chains) == (1000, 1000, 4)


def test_unknown_key_is_an_error_with_a_suggestion() -> None:
    with pytest.raises(SpecError) as info:
        parse("[summary]\ncredible_mas = 0.9\n")
    message = str(info.value)
    assert "summary.credible_mas" in message
    assert "did you mean `credible_mass`" in message


def test_wrong_type_names_the_key_path() -> None:
    with pytest.raises(SpecError, match=r"sampler\.draws"):
        parse("[sampler]\ndraws = \"many\"\n")


def test_not_toml_is_reported_as_such() -> None:
    with pytest.raises(SpecError, match="not valid TOML"):
        parse_spec_text("[report\ntitle=", Path("spec.toml"))


@pytest.mark.parametrize("table", [
    "[priors.rho]\nfamily = \"beta\"\na = -1\n",
    "[[rules]]\nname = \"r\"\nstatement = \"above\"\nthreshold = 1.5\n",
    "[[rules]]\nname = \"r\"\nstatement = \"above\"\nthreshold = 0.2\nrequired_probability = 1.0\n",
    "[[rules]]\nname = \"r\"\nstatement = \"between\"\nlower = 0.5\nupper = 0.1\n",
    "[summary]\ncredible_mass = 1.2\n",
    "[sampler]\nchains = 0\n",
    "[priors.sds]\nscale = -2\n",
])
def test_impossible_values_are_refused(table: str) -> None:
    with pytest.raises(SpecError):
        parse(table)


def test_rule_needs_its_bounds() -> None:
    with pytest.raises(SpecError, match="needs `threshold`"):
        parse("[[rules]]\nname = \"r\"\nstatement = \"above\"\n")


def test_pair_sets_expand_to_all_pairs_and_may_hold_a_listed_pair() -> None:
    doc = parse_spec_text(MINIMAL.replace("[[pairs]]\nx = \"a\"\ny = \"b\"\n", "")
                          + "[[pair_sets]]\nname = \"g\"\ncolumns = [\"a\", \"b\", \"c\", \"d\"]\n",
                          Path("s.toml"))
    pairs = expand_pairs(doc)
    assert len(pairs) == 6  # 4 choose 2
    assert {p.pair_set for p in pairs} == {"g"}
    # the listed pair (a, b) is fitted once, as listed, and shown in the set's matrix
    (pair,) = expand_pairs(parse("[[pair_sets]]\nname = \"g\"\ncolumns = [\"b\", \"a\"]\n"))
    assert (pair.x, pair.y, pair.pair_set, pair.pair_sets) == ("a", "b", "", ("g",))
    with pytest.raises(SpecError, match="already listed"):
        expand_pairs(parse("[[pairs]]\nx = \"b\"\ny = \"a\"\n"))


def test_a_column_paired_with_itself_is_refused() -> None:
    doc = parse_spec_text(MINIMAL.replace('y = "b"', 'y = "a"'), Path("s.toml"))
    with pytest.raises(SpecError, match="two different columns"):
        expand_pairs(doc)


def test_per_pair_prior_override_replaces_that_prior_only() -> None:
    doc = parse("[[pairs]]\nx = \"c\"\ny = \"d\"\n[pairs.priors.rho]\nfamily = \"beta\"\na = 2\nb = 2\n")
    first, second = expand_pairs(doc)
    assert first.priors.rho.shapes == (1.0, 1.0)
    assert second.priors.rho.shapes == (2.0, 2.0)
    assert second.priors.sds == first.priors.sds


def test_load_spec_hashes_the_file_and_applies_overrides(tmp_path: Path) -> None:
    import hashlib

    path = tmp_path / "spec.toml"
    path.write_text(MINIMAL, encoding="utf-8")
    spec = load_spec(path)
    assert spec.source_sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    quick = with_sampler_overrides(spec, draws=50, chains=None)
    assert quick.document.sampler.draws == 50 and quick.document.sampler.chains == 4
    with pytest.raises(SpecError, match="--draws"):
        with_sampler_overrides(spec, draws=0)


def test_missing_spec_file_is_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(SpecError, match="not found"):
        load_spec(tmp_path / "nope.toml")
