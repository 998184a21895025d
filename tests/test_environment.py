"""The environment fingerprint: what besides inputs and package versions decides a run's bytes."""

from __future__ import annotations

import hashlib
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from reportgen import assets
from reportgen.report import render
from reportgen.runs import environment
from reportgen.spec import load_spec

EXPECTED_KEYS = {"cpu_model", "numerical_libraries", "threads", "pdf_renderer", "fonts", "fontconfig_matches",
                 "templates_sha256", "shipped_templates_sha256", "logo_sha256"}


@pytest.fixture(scope="module")
def fingerprint(tmp_path_factory: pytest.TempPathFactory) -> dict:
    folder = tmp_path_factory.mktemp("environment")
    (folder / "data.csv").write_text("a,b\n1,2\n2,3\n3,5\n", encoding="utf-8")
    spec = '[report]\ntitle = "Fingerprint"\n\n[data]\npath = "data.csv"\n\n[[pairs]]\nx = "a"\ny = "b"\n'
    (folder / "spec.toml").write_text(spec, encoding="utf-8")
    return environment.environment_fingerprint(load_spec(folder / "spec.toml"))


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_fingerprint_has_every_part(fingerprint: dict) -> None:
    assert set(fingerprint) == EXPECTED_KEYS
    assert {"weasyprint", "pango", "harfbuzz", "harfbuzz_subset", "fontconfig", "cairo", "loaded_libraries",
            "python_packages"} <= set(fingerprint["pdf_renderer"])
    assert set(fingerprint["threads"]["variables"]) == set(environment.THREAD_VARIABLES)
    assert isinstance(fingerprint["cpu_model"], str) and fingerprint["cpu_model"]
    assert fingerprint["templates_sha256"] == "" and fingerprint["logo_sha256"] == ""  # the spec names none


def test_font_hashes_are_those_of_the_files_the_renderer_embeds(fingerprint: dict) -> None:
    """Checked against hashlib over the files report.render hands to the PDF renderer."""
    _, files = render._font_css()
    assert fingerprint["fonts"] == {path.name: sha256(path) for path in files.values()}
    assert len(fingerprint["fonts"]) == len(assets.FONT_FILES)


@pytest.mark.skipif(shutil.which("fc-match") is None, reason="fontconfig's fc-match is not installed")
def test_monospace_family_is_matched_by_fontconfig(fingerprint: dict) -> None:
    """The shipped stylesheet names "DejaVu Sans Mono" for code; the file fc-match serves is hashed."""
    found = subprocess.run(["fc-match", "-f", "%{file}", "DejaVu Sans Mono"], capture_output=True, text=True,
                           check=True).stdout.strip()
    match = fingerprint["fontconfig_matches"]["DejaVu Sans Mono"]
    assert match == {"file": Path(found).name, "sha256": sha256(Path(found))}


def test_pango_version_is_what_the_renderer_reports(fingerprint: dict) -> None:
    """WeasyPrint's binding returns Pango's packed number (major * 10000 + minor * 100 + micro, Pango's
    PANGO_VERSION_ENCODE); its own code compares it with 14802 for Pango 1.48.2."""
    from weasyprint.text import ffi

    number = int(ffi.pango.pango_version())
    major, rest = divmod(number, 10000)
    minor, micro = divmod(rest, 100)
    assert fingerprint["pdf_renderer"]["pango"] == f"{major}.{minor}.{micro}"
    assert environment.pango_version_text(14802) == "1.48.2"
    # on Linux the shared object's name carries the same version (libpango-1.0.so.0.<minor*100>.<micro>)
    names = [n for n in fingerprint["pdf_renderer"]["loaded_libraries"] if n.startswith("libpango-1.0.so.0.")]
    if names:
        assert names[0].split(".so.0.")[1] == f"{minor * 100}.{micro}"


def test_harfbuzz_version_agrees_with_the_renderers_check(fingerprint: dict) -> None:
    """hb_version_atleast, which WeasyPrint declares, is true for the recorded version and false one
    micro version later."""
    from weasyprint.text import ffi

    major, minor, micro = (int(part) for part in fingerprint["pdf_renderer"]["harfbuzz"].split("."))
    assert ffi.harfbuzz.hb_version_atleast(major, minor, micro)
    assert not ffi.harfbuzz.hb_version_atleast(major, minor, micro + 1)


def test_blas_is_numpys_build_and_no_machine_paths(fingerprint: dict) -> None:
    built = np.show_config(mode="dicts")["Build Dependencies"]["blas"]
    assert fingerprint["numerical_libraries"]["numpy_build"]["blas"]["name"] == built["name"]
    pools = fingerprint["numerical_libraries"]["threadpools"]
    if isinstance(pools, list):
        assert all("filepath" not in pool for pool in pools)


def test_thread_settings_follow_the_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    monkeypatch.delenv("MKL_NUM_THREADS", raising=False)
    settings = environment.thread_settings()
    assert settings["variables"]["OMP_NUM_THREADS"] == "3" and settings["variables"]["MKL_NUM_THREADS"] == ""


def test_folder_hash_sees_bytes_and_names_not_the_place(tmp_path: Path) -> None:
    assert environment.folder_sha256(None) == ""
    first = tmp_path / "one"
    (first / "sub").mkdir(parents=True)
    (first / "report.css").write_text("h1 { color: navy; }\n", encoding="utf-8")
    (first / "sub" / "_title.html.j2").write_text("<h1>{{ meta.title }}</h1>\n", encoding="utf-8")
    reference = environment.folder_sha256(first)
    shutil.copytree(first, tmp_path / "two")
    assert environment.folder_sha256(tmp_path / "two") == reference  # relative paths: the place does not count
    (tmp_path / "two" / "report.css").write_text("h1 { color: teal; }\n", encoding="utf-8")
    assert environment.folder_sha256(tmp_path / "two") != reference
    (first / "report.css").rename(first / "other.css")
    assert environment.folder_sha256(first) != reference
    # name "a" holding "bc" and name "ab" holding "c" run together alike; the lengths tell them apart
    (tmp_path / "three").mkdir()
    (tmp_path / "four").mkdir()
    (tmp_path / "three" / "a").write_bytes(b"bc")
    (tmp_path / "four" / "ab").write_bytes(b"c")
    assert environment.folder_sha256(tmp_path / "three") != environment.folder_sha256(tmp_path / "four")
