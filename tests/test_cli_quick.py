"""The command line as a newcomer meets it: short options, the demo's folder, help on every option."""

from __future__ import annotations

import re
from pathlib import Path

import click
from click.testing import CliRunner

from reportgen.cli import main

README = Path(__file__).resolve().parents[1] / "README.md"
MAKEFILE = Path(__file__).resolve().parents[1] / "Makefile"


def _commands() -> list[tuple[str, click.Command]]:
    group = main
    assert isinstance(group, click.Group)
    return [("reportgen", group)] + [(f"reportgen {name}", command) for name, command in group.commands.items()]


def test_every_option_of_every_command_has_help() -> None:
    missing = [f"{where} {'/'.join(param.opts)}"
               for where, command in _commands()
               for param in command.get_params(click.Context(command))
               if isinstance(param, click.Option) and not (param.help or "").strip()]
    assert missing == []


def test_run_takes_o_as_the_short_form_of_out() -> None:
    run = main.commands["run"]  # type: ignore[attr-defined]
    out = next(p for p in run.params if p.name == "out")
    assert "-o" in out.opts and "--out" in out.opts
    # the same short form as init's -o, so a newcomer's guess works on both commands
    init = main.commands["init"]  # type: ignore[attr-defined]
    assert "-o" in next(p for p in init.params if p.name == "output").opts


def test_run_with_o_reaches_the_spec_check(tmp_path: Path) -> None:
    """`-o` is parsed as --out: a missing spec is refused (exit 2, our message), not a usage error of click."""
    result = CliRunner().invoke(main, ["run", str(tmp_path / "absent.toml"), "-o", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert "no such option" not in result.output.lower()


def test_demo_default_folder_is_the_one_the_readme_and_makefile_name() -> None:
    demo = main.commands["demo"]  # type: ignore[attr-defined]
    default = Path(next(p for p in demo.params if p.name == "out").default)
    assert default == Path("demo_output")
    readme = README.read_text(encoding="utf-8")
    assert f"{default}/2026-11/report.html" in readme
    makefile = MAKEFILE.read_text(encoding="utf-8")
    assert re.search(rf"reportgen demo --out {default}\b", makefile)
    clean = makefile.split("clean:", 1)[1]
    assert str(default) in clean
