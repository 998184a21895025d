"""What, besides the inputs and the package versions, decides a run's bytes: the machine's numerical
libraries and thread settings, the PDF renderer's native libraries, the font files, the template folder,
the logo and the CPU.

The fingerprint goes into record.json beside the reproducible part, not inside it: the reproducible part is
printed in the report's appendix, and a CPU name must not change the PDF. ``verify`` compares the
fingerprints of two runs to explain why their bytes differ. Nothing here may fail a run: a part that cannot
be read is recorded as such.
"""

from __future__ import annotations

import ctypes
import hashlib
import importlib.metadata
import json
import os
import platform
import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import numpy as np

from reportgen.assets import font_files, shipped_templates
from reportgen.data import file_sha256
from reportgen.spec import Spec

THREAD_VARIABLES = ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS", "NUMBA_NUM_THREADS",
                    "NUMBA_THREADING_LAYER", "PYTENSOR_FLAGS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")
# Python packages the PDF renderer leans on (layout, PDF writing, font subsetting, images); the scientific
# packages are in the reproducible part already.
RENDERER_PACKAGES = ("pydyf", "fonttools", "tinycss2", "cssselect2", "tinyhtml5", "pillow", "brotli", "zopfli",
                     "cffi", "threadpoolctl")
# The native libraries of text layout, shaping, font lookup and rasterising, as the process has them mapped.
NATIVE_LIBRARIES = re.compile(r"lib(pango|pangoft2|harfbuzz|harfbuzz-subset|fontconfig|freetype|cairo|fribidi"
                              r"|png16|jpeg|z)(-[^/\s.]*(\.\d+)*)?\.so[^/\s]*")
GENERIC_FAMILIES = frozenset({"inherit", "initial", "serif", "sans-serif", "monospace", "cursive", "fantasy",
                              "system-ui"})
UNREADABLE = "unreadable"


def folder_sha256(folder: Path | None) -> str:
    """One hash of a folder: every entry by sorted relative path, then its bytes ("" for no folder).

    Each path and each length is written before the bytes, so moving bytes from one file to another
    changes the hash. Links are not followed (the template loader refuses them); their target is hashed.
    """
    if folder is None:
        return ""
    digest = hashlib.sha256()
    entries = sorted((path.relative_to(folder).as_posix(), path) for path in folder.rglob("*"))
    for relative, path in entries:
        if path.is_symlink():
            content = b"link:" + os.readlink(path).encode()
        elif path.is_file():
            content = path.read_bytes()
        else:
            continue  # a folder is named by the paths of what it holds
        name = relative.encode()
        digest.update(len(name).to_bytes(8, "big") + name + len(content).to_bytes(8, "big"))
        digest.update(content)
    return digest.hexdigest()


def optional_sha256(path: Path | None) -> str:
    """A file's hash, "" when the spec names none."""
    return file_sha256(path) if path is not None else ""


def templates_folder(spec: Spec) -> Path | None:
    relative = spec.document.report.templates
    return spec.resolve_input(relative, "report.templates") if relative else None


def logo_file(spec: Spec) -> Path | None:
    relative = spec.document.report.logo
    return spec.resolve_input(relative, "report.logo") if relative else None


def _guarded(read: Any) -> Any:
    try:
        return read()
    except Exception as exc:  # a fingerprint part that cannot be read must not sink the run
        return f"{UNREADABLE} ({type(exc).__name__})"


def numerical_libraries() -> dict[str, Any]:
    """numpy's BLAS and LAPACK build, and the thread pools the process has loaded (when threadpoolctl is
    installed): the kernel an optimised BLAS picks for this CPU decides the last bits of a sum."""
    config = np.show_config(mode="dicts").get("Build Dependencies", {})
    built = {name: {key: str(config.get(name, {}).get(key, "")) for key in ("name", "version",
                                                                          "openblas configuration")}
             for name in ("blas", "lapack")}
    try:
        import threadpoolctl
    except ImportError:
        pools: Any = "threadpoolctl not installed"
    else:
        # file paths differ between machines without changing a bit of the results: only the file's name is
        # kept; the libraries load in an order that varies between processes, so they are sorted
        pools = sorted(({"library": Path(str(pool.get("filepath", ""))).name,
                         **{key: value for key, value in pool.items() if key not in ("filepath", "prefix")}}
                        for pool in threadpoolctl.threadpool_info()),
                       key=lambda pool: json.dumps(pool, sort_keys=True, default=str))
    return {"numpy_build": built, "threadpools": pools}


def thread_settings() -> dict[str, Any]:
    return {"variables": {name: os.environ.get(name, "") for name in THREAD_VARIABLES},
            "cpu_count": os.cpu_count()}


def _library_version(names: tuple[str, ...], function: str) -> str:
    """A native library's own version string, asked through the library already loaded."""
    for name in names:
        try:
            library = ctypes.CDLL(name)
        except OSError:
            continue
        call = getattr(library, function)
        call.restype = ctypes.c_char_p
        return str(call().decode())
    return "not found"


def _mapped_libraries() -> list[str]:
    """The file names of the text and image libraries mapped into this process (Linux only); the names
    carry the full versions, freetype's and fribidi's included."""
    try:
        maps = Path("/proc/self/maps").read_text(encoding="utf-8", errors="replace")
    except OSError:
        return []
    return sorted({match.group(0) for match in NATIVE_LIBRARIES.finditer(maps)})


def pango_version_text(number: int) -> str:
    """Pango's packed version number (major * 10000 + minor * 100 + micro) as "1.50.12"."""
    return f"{number // 10000}.{number // 100 % 100}.{number % 100}"


def renderer_libraries() -> dict[str, Any]:
    """What the PDF renderer reports of its native libraries (Pango through its own binding, HarfBuzz,
    fontconfig and Cairo by their version functions), and the Python packages it builds the PDF with."""
    import weasyprint
    from weasyprint.text import ffi  # loads Pango, HarfBuzz and fontconfig as the renderer does

    loaded = _mapped_libraries()
    cairo = (_library_version(("libcairo.so.2", "libcairo.2.dylib", "libcairo-2.dll"), "cairo_version_string")
             if any(name.startswith("libcairo") for name in loaded) else "not used")
    packages = {}
    for name in RENDERER_PACKAGES:
        try:
            packages[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            packages[name] = "not installed"
    return {
        "weasyprint": weasyprint.__version__,
        "pango": pango_version_text(int(ffi.pango.pango_version())),
        "harfbuzz": _guarded(lambda: _library_version(
            ("libharfbuzz.so.0", "libharfbuzz.0.dylib", "libharfbuzz-0.dll"), "hb_version_string")),
        # without HarfBuzz's subsetter, fonts are subset by fontTools, which writes other bytes
        "harfbuzz_subset": "available" if getattr(ffi, "harfbuzz_subset", None) is not None else "not available",
        "fontconfig": _guarded(_fontconfig_version),
        "cairo": cairo,
        "loaded_libraries": loaded,
        "python_packages": packages,
    }


def _fontconfig_version() -> str:
    """fontconfig's packed version (major * 10000 + minor * 100 + revision); the renderer's binding does not
    declare FcGetVersion, so the library it loaded is asked directly."""
    for name in ("libfontconfig.so.1", "libfontconfig.1.dylib", "libfontconfig-1.dll"):
        try:
            number = int(ctypes.CDLL(name).FcGetVersion())
        except (OSError, AttributeError):
            continue
        return pango_version_text(number)
    return "not found"


def report_fonts() -> dict[str, Any]:
    """The font files the report embeds (the shipped faces the renderer is given), by file name and hash."""
    return {path.name: file_sha256(path) for path in sorted(font_files().values())}


def css_families(folders: list[Path]) -> list[str]:
    """The first family of every ``font-family`` list in the report's stylesheet (the user's report.css
    when there is one, else the shipped one), except our own face and generic names: these are the
    families fontconfig is asked for."""
    for folder in folders:
        css = folder / "report.css"
        if css.is_file():
            text = css.read_text(encoding="utf-8", errors="replace")
            break
    else:
        return []
    families: dict[str, None] = {}
    for declaration in re.findall(r"font-family\s*:\s*([^;}]+)", text):
        first = declaration.split(",")[0].strip().strip("\"'")
        if first and first != "Report Sans" and first.lower() not in GENERIC_FAMILIES:
            families.setdefault(first)
    return list(families)


def fontconfig_matches(families: list[str]) -> dict[str, Any]:
    """Which file fontconfig serves for each family the stylesheet names (monospace and serif text)."""
    program = shutil.which("fc-match")
    if program is None:
        return {"fc-match": "not installed"}
    matches: dict[str, Any] = {}
    for family in families:
        try:
            found = subprocess.run([program, "-f", "%{file}", family], capture_output=True, text=True,
                                   timeout=10, check=False).stdout.strip()
        except (OSError, subprocess.SubprocessError) as exc:
            matches[family] = f"{UNREADABLE} ({type(exc).__name__})"
            continue
        path = Path(found)
        matches[family] = ({"file": path.name, "sha256": file_sha256(path)} if found and path.is_file()
                           else "no match")
    return matches


def cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text(encoding="utf-8", errors="replace").splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def environment_fingerprint(spec: Spec) -> dict[str, Any]:
    """Everything outside the inputs and the package versions that can change a run's bytes."""
    user_templates = templates_folder(spec)
    shipped = [shipped_templates()]
    return {
        "cpu_model": cpu_model(),
        "numerical_libraries": _guarded(numerical_libraries),
        "threads": thread_settings(),
        "pdf_renderer": _guarded(renderer_libraries),
        "fonts": _guarded(report_fonts),
        "fontconfig_matches": _guarded(lambda: fontconfig_matches(
            css_families(([user_templates] if user_templates else []) + shipped))),
        "templates_sha256": folder_sha256(user_templates),
        "shipped_templates_sha256": _guarded(lambda: folder_sha256(shipped[0])),
        "logo_sha256": optional_sha256(logo_file(spec)),
    }
