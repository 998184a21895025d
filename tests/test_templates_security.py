"""Hostile templates and logos (issue 8, items 1, 7, 13 and 17): refused in one line, before any fit.

A template folder or a logo handed over by someone else must not run a command, read a
file outside the template folders, or exhaust memory. Each case goes through the command
line (``reportgen check``, and ``reportgen run --engine exact`` where the refusal can only
come while rendering) and checks the contract of DEVELOPERS.md: exit code 2, one line
``reportgen: error: <message>`` naming the template file and line (or the logo), no
traceback, no output folder, no file created by the payload, and nothing of the file the
template tried to read in any output. docs/bad-input.md lists the messages.
"""

from __future__ import annotations

import base64
import io
import os
import struct
import zlib
from pathlib import Path

import pandas as pd
import pytest
from jinja2.exceptions import SecurityError
from jinja2.utils import Cycler, Joiner, Namespace

from reportgen.report import environment, logo_data_uri
from reportgen.spec import load_spec
from tests.conftest import write_spec
from tests.test_bad_input import invoke, refused

PAIR = '\n[[pairs]]\nx = "a"\ny = "b"\n'
DATA = pd.DataFrame({"a": [1.2, 2.4, 3.1, 4.8, 5.0, 6.3], "b": [2.0, 1.1, 3.9, 3.2, 6.1, 5.5]})
SECRET = "/etc/passwd"
SECRET_TEXT = "root:"  # the first line of every /etc/passwd
NOT_ALLOWED = "which templates may not"


def project(tmp_path: Path, templates: dict[str, str] | None = None, *, logo: str = "",
            confine: bool = False) -> Path:
    """A spec and data in ``tmp_path``, with user templates in ``tmp_path/tpl`` (name -> text) and a logo path."""
    DATA.to_csv(tmp_path / "data.csv", index=False)
    spec = write_spec(tmp_path, PAIR)
    extra = ""
    if templates is not None:
        (tmp_path / "tpl").mkdir(exist_ok=True)
        for name, text in templates.items():
            (tmp_path / "tpl" / name).write_text(text, encoding="utf-8")
        extra += '\ntemplates = "tpl"'
    if logo:
        extra += f'\nlogo = "{logo}"'
    text = spec.read_text(encoding="utf-8").replace('title = "Test report"', 'title = "T"' + extra)
    if confine:
        text = text.replace('path = "data.csv"', 'path = "data.csv"\nconfine_to_spec_folder = true')
    spec.write_text(text, encoding="utf-8")
    return spec


def run_refused(spec: Path, *expected: str) -> str:
    """``reportgen run SPEC --engine exact`` is refused in one line; no output or staging folder is left."""
    out = spec.parent / "report_out"
    message = refused("run", spec, "--out", out, "--engine", "exact")
    for text in expected:
        assert text in message, f"{text!r} not in {message!r}"
    assert SECRET_TEXT not in message and "uid=" not in message
    assert not out.exists()
    assert not list(spec.parent.glob(".report_out*")), "a staging folder was left behind"
    return message


def check_refused(spec: Path, *expected: str) -> str:
    message = refused("check", spec)
    for text in expected:
        assert text in message, f"{text!r} not in {message!r}"
    assert SECRET_TEXT not in message and "uid=" not in message
    return message


def both_refused(spec: Path, *expected: str) -> str:
    """Refused by ``check`` (before any fit) and by ``run``, with the same message."""
    message = check_refused(spec, *expected)
    assert run_refused(spec, *expected) == message
    return message


# ------------------------------------------------------------------ the two attacks of the issue


def test_issue_payload_running_a_command_is_refused_and_runs_nothing(tmp_path: Path) -> None:
    marker = tmp_path / "pwned"
    title = ("<header>{{ meta.title }}</header>\n"
             "{{ cycler.__init__.__globals__.os.popen('id').read() }}\n"
             f"{{{{ cycler.__init__.__globals__.os.popen('touch {marker}').read() }}}}\n")
    spec = project(tmp_path, {"_title.html.j2": title})
    message = both_refused(spec, str(tmp_path / "tpl" / "_title.html.j2") + ", line 2", NOT_ALLOWED, "__")
    assert message.startswith(str(tmp_path))
    assert not marker.exists()


@pytest.mark.parametrize("confine", [False, True], ids=["default", "confined"])
def test_issue_payload_including_a_link_to_passwd_is_refused(tmp_path: Path, confine: bool) -> None:
    spec = project(tmp_path, {"_title.html.j2": "<h1>{{ meta.title }}</h1>\n{% include 'pw.txt' %}\n"},
                   confine=confine)
    (tmp_path / "tpl" / "pw.txt").symlink_to(SECRET)
    both_refused(spec, "_title.html.j2, line 2", "'pw.txt'", "symbolic link", "outside the template folders")


# ------------------------------------------------------------------ sandbox variants


@pytest.mark.parametrize("payload", [
    "{{ ''.__class__.__mro__ }}",
    "{{ self._TemplateReference__context }}",
    "{{ lipsum.__globals__ }}",
    "{{ joiner.__init__.__globals__ }}",
    "{{ namespace.__init__.__globals__ }}",
    "{% set x = cycler.__init__ %}",
    "{{ meta|attr('__class__') }}",
    "{{ range.__self__ }}",
    "{{ meta['__class__'] }}",
    "{{ pairs|map(attribute='__class__')|list }}",
    "{{ meta.items.__self__ }}",
])
def test_template_reaching_for_internals_is_refused_before_any_fit(tmp_path: Path, payload: str) -> None:
    spec = project(tmp_path, {"_title.html.j2": "<h1>{{ meta.title }}</h1>\n\n" + payload + "\n"})
    check_refused(spec, "_title.html.j2, line 3", NOT_ALLOWED)


@pytest.mark.parametrize(("payload", "expected"), [
    ("{{ request }}", "'request' is undefined"),
    ("{{ config }}", "'config' is undefined"),
    ("{{ cycler }}", "'cycler' is undefined"),  # Jinja's default globals are gone
    ("{{ '{0.__class__}'.format(1) }}", NOT_ALLOWED),
    ("{% set n = '__cla' ~ 'ss__' %}{{ meta|attr(n) }}", NOT_ALLOWED),
    ("{{ pairs.append(1) }}", NOT_ALLOWED),  # the sandbox is immutable: the context cannot be changed
    ("{% include ['absent.j2', 'pw.txt'] %}", "symbolic link"),
])
def test_template_refused_while_rendering_names_file_and_line(tmp_path: Path, payload: str, expected: str) -> None:
    """What only rendering can find (names computed at render time, the report's own values)."""
    spec = project(tmp_path, {"_title.html.j2": "<h1>{{ meta.title }}</h1>\n" + payload + "\n"})
    (tmp_path / "tpl" / "pw.txt").symlink_to(SECRET)
    run_refused(spec, str(tmp_path / "tpl" / "_title.html.j2") + ", line 2", expected, "may not")


def test_sandbox_refuses_internals_even_when_the_helpers_are_given() -> None:
    """The sandbox itself, without the early check: Jinja's helpers passed in explicitly still lead nowhere."""
    env = environment()
    helpers = {"cycler": Cycler(1), "joiner": Joiner(), "namespace": Namespace}
    for payload in ("{{ cycler.__init__.__globals__.os.popen('id').read() }}",
                    "{{ joiner.__init__.__globals__ }}", "{{ namespace.__init__.__globals__ }}",
                    "{% set x = cycler.__init__ %}", "{{ ''.__class__.__mro__ }}", "{{ (1).__class__ }}",
                    "{{ ''|attr('__class__') }}"):
        with pytest.raises(SecurityError):
            env.from_string(payload).render(**helpers)


# ------------------------------------------------------------------ loader variants


@pytest.mark.parametrize(("payload", "expected"), [
    ("{% include 'sub/x.j2' %}", "symbolic link"),
    ("{% include '../data.csv' %}", "not a plain name"),
    ("{% include '/etc/passwd' %}", "not a plain name"),
    ("{% include 'a\\x00b' %}", "not a plain name"),
    ("{% import 'pw.txt' as m %}", "symbolic link"),
    ("{% extends 'pw.txt' %}", "symbolic link"),
    ("{% include 'fifo.txt' %}", "not a regular file"),
    ("{% include 'absent.j2' %}", "neither in"),
], ids=["linked-subfolder", "parent", "absolute", "nul", "import-link", "extends-link", "fifo", "absent"])
def test_include_that_leaves_the_template_folders_is_refused(tmp_path: Path, payload: str, expected: str) -> None:
    spec = project(tmp_path, {"_title.html.j2": "<h1>{{ meta.title }}</h1>\n" + payload + "\n"})
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    (outside / "x.j2").write_text("outside", encoding="utf-8")
    (tmp_path / "tpl" / "sub").symlink_to(outside)
    (tmp_path / "tpl" / "pw.txt").symlink_to(SECRET)
    os.mkfifo(tmp_path / "tpl" / "fifo.txt")
    check_refused(spec, str(tmp_path / "tpl" / "_title.html.j2") + ", line 2", expected)


@pytest.mark.parametrize("target", [SECRET, "loop"], ids=["to-passwd", "loop"])
def test_template_file_that_is_a_link_is_refused(tmp_path: Path, target: str) -> None:
    spec = project(tmp_path, {})
    link = tmp_path / "tpl" / "_title.html.j2"
    if target == "loop":
        os.symlink("_other.html.j2", link)
        os.symlink("_title.html.j2", tmp_path / "tpl" / "_other.html.j2")
    else:
        link.symlink_to(target)
    both_refused(spec, str(tmp_path / "tpl"), "is a symbolic link", "report.templates")


def test_template_that_does_not_parse_is_refused_before_any_fit(tmp_path: Path, monkeypatch) -> None:
    def no_fits(*args: object, **kwargs: object) -> None:
        raise AssertionError("a pair was fitted although a template does not parse")

    monkeypatch.setattr("reportgen.runner.fit_all", no_fits)
    spec = project(tmp_path, {"_pair.html.j2": "<p>{{ pair.title }}</p>\n{% if %}\n"})
    check_refused(spec, "_pair.html.j2, line 2", "does not parse")
    out = tmp_path / "report_out"
    refused("run", spec, "--out", out)  # the sampler's engine: still nothing is fitted
    assert not out.exists()


def test_benign_user_template_still_renders(tmp_path: Path) -> None:
    title = ('<header class="own">{{ meta.title|upper }} for {{ meta.date_long }}</header>\n'
             '{% for pair in pairs %}<i>{{ loop.index }}. {{ pair.title }}</i>{% endfor %}\n'
             '<div class="banner {{ banner.level }}">{{ banner.text }}</div>\n')
    spec = project(tmp_path, {"_title.html.j2": title})
    assert invoke("check", spec).exit_code == 0
    result = invoke("run", spec, "--out", tmp_path / "out", "--engine", "exact")
    assert result.exit_code == 0, result.output
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert '<header class="own">T for' in html and "<i>1. " in html
    assert "Summary of results" in html  # the shipped templates still fill the rest


# ------------------------------------------------------------------ logos


def png_bomb(width: int = 30000, height: int = 30000) -> bytes:
    """A valid 1-bit greyscale PNG of zeros: 30000 x 30000 pixels in about 110 KB, as in the issue.

    Written chunk by chunk with zlib (the PNG layout of the W3C PNG specification) because
    Pillow takes seconds to encode 900 million pixels.
    """
    def chunk(kind: bytes, body: bytes) -> bytes:
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))

    row = b"\x00" * (1 + (width + 7) // 8)  # filter byte, then the packed bits
    packer = zlib.compressobj(9)
    rows = [packer.compress(row * 1000) for _ in range(height // 1000)]
    rows += [packer.compress(row * (height % 1000)), packer.flush()]
    header = struct.pack(">IIBBBBB", width, height, 1, 0, 0, 0, 0)
    return b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", header) + chunk(b"IDAT", b"".join(rows)) + chunk(b"IEND", b"")


def real_image(kind: str) -> bytes:
    from PIL import Image

    buffer = io.BytesIO()
    Image.new("RGB", (48, 24), (42, 111, 119)).save(buffer, kind)
    return buffer.getvalue()


@pytest.mark.parametrize(("content", "expected"), [
    (lambda: b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4, "not a PNG or JPEG"),
    (png_bomb, "more than 25 million pixels"),
    (lambda: b"\xff\xd8\xff" + b'<svg xmlns="http://www.w3.org/2000/svg"><text>x</text></svg>', "not a PNG or JPEG"),
    (lambda: real_image("PNG")[:-30], "not a PNG or JPEG image that decodes"),
    (lambda: real_image("JPEG")[:200], "not a PNG or JPEG image that decodes"),
], ids=["png-header-then-garbage", "png-bomb", "jpeg-header-on-svg", "truncated-png", "truncated-jpeg"])
def test_logo_that_does_not_decode_or_is_too_large_is_refused(tmp_path: Path, content, expected: str) -> None:
    (tmp_path / "logo.png").write_bytes(content())
    check_refused(project(tmp_path, logo="logo.png"), str(tmp_path / "logo.png"), "(report.logo)", expected)


def test_logo_that_is_a_link_loop_is_refused(tmp_path: Path) -> None:
    os.symlink("b", tmp_path / "a")
    os.symlink("a", tmp_path / "b")
    message = check_refused(project(tmp_path, logo="a"), "report.logo")
    assert "loop" in message


@pytest.mark.parametrize("kind", ["PNG", "JPEG"])
def test_real_logo_is_inlined_as_its_original_bytes(tmp_path: Path, kind: str) -> None:
    data = real_image(kind)
    (tmp_path / "logo.img").write_bytes(data)
    uri = logo_data_uri(load_spec(project(tmp_path, logo="logo.img")))
    mime, encoded = uri.removeprefix("data:").split(";base64,")
    assert mime == f"image/{kind.lower()}"
    assert base64.b64decode(encoded) == data


def test_template_folder_that_is_a_link_loop_is_refused(tmp_path: Path) -> None:
    """`report.templates` naming a symbolic link loop: one line and exit 2, not Python's "Symlink loop" traceback."""
    from click.testing import CliRunner

    from reportgen.cli import main
    from tests.conftest import correlated_frame, write_spec

    correlated_frame(20, 0.5, seed=1).to_csv(tmp_path / "data.csv", index=False)
    spec = write_spec(tmp_path, '[[pairs]]\nx = "a"\ny = "b"\n')
    spec.write_text(spec.read_text(encoding="utf-8").replace('[data]', '[data]\n', 1).replace(
        'title = "Test report"', 'title = "Test report"\ntemplates = "loop"'), encoding="utf-8")
    (tmp_path / "loop").symlink_to(tmp_path / "loop2")
    (tmp_path / "loop2").symlink_to(tmp_path / "loop")
    result = CliRunner().invoke(main, ["check", str(spec)])
    assert result.exit_code == 2
    assert "back to itself" in result.output and "report.templates" in result.output
    assert "Traceback" not in result.output and len(result.output.strip().splitlines()) == 1


@pytest.mark.parametrize(("payload", "expected"), [
    ("{{ (9**999999999) > 1 }}", "exponent 999999999"),
    ("{{ ('x'*10**6)*10**5 }}", "more than 1,000,000 items"),
    ("{{ [0] * 10**9 }}", "more than 1,000,000 items"),
], ids=["huge-power", "huge-string", "huge-list"])
def test_template_arithmetic_that_would_hang_or_fill_memory_is_refused(tmp_path: Path, payload: str,
                                                                         expected: str) -> None:
    """9 ** 999999999 ran for minutes and 'x' * 10 ** 11 filled memory: both are bounded before computing."""
    run_refused(project(tmp_path, {"_title.html.j2": payload + "\n"}), "_title.html.j2, line 1", expected)


def test_ordinary_template_arithmetic_still_works(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from reportgen.cli import main

    spec = project(tmp_path, {"_title.html.j2": "<h1>{{ 2 ** 10 * 3 }} {{ 'ab' * 3 }}</h1>\n"})
    result = CliRunner().invoke(main, ["run", str(spec), "--out", str(tmp_path / "out"), "--engine", "exact"])
    assert result.exit_code == 0, result.output
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "3072 ababab" in html
