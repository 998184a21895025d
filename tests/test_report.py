"""Report assets and templates: user overrides, logos, escaping."""

from __future__ import annotations

from pathlib import Path

import pytest

from reportgen.errors import ReportAssetError
from reportgen.report import environment, logo_data_uri
from reportgen.spec import load_spec
from tests.conftest import write_spec


def test_user_template_folder_overrides_a_shipped_template(tmp_path: Path) -> None:
    (tmp_path / "_cautions.html.j2").write_text("<p>own cautions {{ cautions|length }}</p>", encoding="utf-8")
    env = environment(tmp_path)
    assert env.get_template("_cautions.html.j2").render(cautions=[1, 2]) == "<p>own cautions 2</p>"
    assert "@page" in env.get_template("report.css").render()  # others still come from the shipped folder


def test_templates_autoescape_and_are_strict(tmp_path: Path) -> None:
    from jinja2 import UndefinedError

    (tmp_path / "probe.html.j2").write_text("{{ value }}", encoding="utf-8")
    env = environment(tmp_path)
    assert env.get_template("probe.html.j2").render(value="<b>{{ x }}</b>") == "&lt;b&gt;{{ x }}&lt;/b&gt;"
    with pytest.raises(UndefinedError):
        env.get_template("probe.html.j2").render()


def test_missing_template_folder_is_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(ReportAssetError, match="report.templates"):
        environment(tmp_path / "absent")


def _spec_with_logo(folder: Path, logo: str) -> object:
    (folder / "data.csv").write_text("a,b\n1,2\n2,1\n3,4\n4,3\n", encoding="utf-8")
    path = write_spec(folder, '\n[[pairs]]\nx = "a"\ny = "b"\n')
    text = path.read_text(encoding="utf-8").replace('title = "Test report"', f'title = "T"\nlogo = "{logo}"')
    path.write_text(text, encoding="utf-8")
    return load_spec(path)


def test_logo_must_be_a_real_image(tmp_path: Path) -> None:
    (tmp_path / "logo.png").write_text("not an image", encoding="utf-8")
    with pytest.raises(ReportAssetError, match="not a PNG or JPEG"):
        logo_data_uri(_spec_with_logo(tmp_path, "logo.png"))
    with pytest.raises(ReportAssetError, match="not found"):
        logo_data_uri(_spec_with_logo(tmp_path, "missing.png"))


def test_a_valid_logo_is_inlined(tmp_path: Path) -> None:
    import io

    from PIL import Image

    buffer = io.BytesIO()
    Image.new("RGB", (48, 24), (40, 110, 120)).save(buffer, "PNG")  # a real PNG: the logo is decoded now
    (tmp_path / "logo.png").write_bytes(buffer.getvalue())
    assert logo_data_uri(_spec_with_logo(tmp_path, "logo.png")).startswith("data:image/png;base64,")


def test_oversized_logo_is_refused(tmp_path: Path) -> None:
    (tmp_path / "big.png").write_bytes(bytes.fromhex("89504e470d0a1a0a") + b"\x00" * (3 * 1024 * 1024))
    with pytest.raises(ReportAssetError, match="under 2 MB"):
        logo_data_uri(_spec_with_logo(tmp_path, "big.png"))
