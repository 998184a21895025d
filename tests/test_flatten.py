"""Figures' SVG with idle groups left out draws exactly what matplotlib's SVG draws.

The reference is matplotlib's own SVG of the same figure: SVG 1.1 (W3C, "The 'g' element") gives a group
without attributes no effect on what it contains, so every drawn element must keep its attributes, its
order and the chain of non-idle ancestors (their styles, transforms and clips).
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pytest

from reportgen import figures
from reportgen.figures import style
from reportgen.figures.flatten import SVG, flattened

DRAWN = {f"{{{SVG}}}{tag}" for tag in ("path", "use", "text", "tspan", "image", "rect", "circle", "line")}


def drawn_elements(svg: str) -> list[tuple[str, dict[str, str], tuple[tuple[tuple[str, str], ...], ...], str]]:
    """Each drawn element in document order: tag, attributes (no-op rotations left out), the attributes of
    each ancestor group that has any but an automatic id, and its text."""
    out = []

    def walk(element: ET.Element, chain: tuple[tuple[tuple[str, str], ...], ...]) -> None:
        for child in element:
            if child.tag == f"{{{SVG}}}metadata":
                continue
            attributes = {k: v for k, v in child.attrib.items()
                          if not (k == "transform" and v.startswith(("rotate(-0 ", "rotate(0 ")))}
            if child.tag in DRAWN:
                out.append((child.tag, attributes, chain, "".join(child.itertext())))
            own = tuple(sorted((k, v) for k, v in attributes.items() if k != "id"))
            kept = tuple(sorted(attributes.items())) if own or not _matplotlib_axis_id(attributes.get("id", "")) \
                else ()
            walk(child, chain + ((kept,) if kept else ()))

    walk(ET.fromstring(svg), ())
    return out


def _matplotlib_axis_id(gid: str) -> bool:
    return gid == "" or gid.split("_")[0] in ("xtick", "ytick", "line2d", "text", "matplotlib.axis")


@pytest.fixture
def raw_and_flat(monkeypatch: pytest.MonkeyPatch):  # type: ignore[no-untyped-def]
    """A figure function's SVG as matplotlib wrote it, and as the report gets it."""
    def both(draw, *args, **kwargs):  # type: ignore[no-untyped-def]
        flat = draw(*args, **kwargs)
        with monkeypatch.context() as patch:
            patch.setattr(style, "flattened", lambda svg: svg)
            raw = draw(*args, **kwargs)
        return raw, flat
    return both


def test_a_scatter_draws_the_same_elements_in_the_same_order(raw_and_flat) -> None:  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(4)
    x = rng.normal(size=80)
    y = 0.5 * x + rng.normal(size=80)
    raw, flat = raw_and_flat(figures.scatter_with_ellipses, x, y, mean=(0.0, 0.0), cov=[[1.0, 0.4], [0.4, 1.2]],
                             x_label='dose <mg> & "rate"', y_label="response", highlight=np.array([3, 7]),
                             highlight_labels=["row 4", "row 8 <b>"])
    assert flattened(raw) == flat
    assert drawn_elements(flat) == drawn_elements(raw)
    assert len(list(ET.fromstring(flat).iter())) < 0.8 * len(list(ET.fromstring(raw).iter()))
    root = ET.fromstring(flat)
    kept = {g.get("id") for g in root.iter(f"{{{SVG}}}g")}
    assert {"highlight-rings", "highlight-label-0", "axes_1", "patch_2"} <= kept
    assert not any(i and i.startswith(("xtick_", "text_", "line2d_")) for i in kept)
    texts = ["".join(t.itertext()) for t in root.iter(f"{{{SVG}}}text")]
    assert 'dose <mg> & "rate"' in texts and "row 8 <b>" in texts  # untrusted text escaped, not lost


def test_a_density_and_the_forest_draw_the_same_elements(raw_and_flat) -> None:  # type: ignore[no-untyped-def]
    grid = np.linspace(-0.99, 0.99, 201)
    density = np.exp(-0.5 * ((grid - 0.3) / 0.1) ** 2)
    raw, flat = raw_and_flat(figures.rho_density, grid, density, prior=np.full_like(grid, 0.5), interval=(0.1, 0.5),
                             mass=0.95, thresholds=[0.3], rope=(-0.1, 0.1))
    assert drawn_elements(flat) == drawn_elements(raw)
    raw, flat = raw_and_flat(figures.forest_plot, ["a and b", "c & d"], [0.2, -0.4], [0.0, -0.6], [0.4, -0.2],
                             statuses=["pass", "warn"], sample_r=[0.21, -0.38], thresholds=[0.3], rope=(-0.1, 0.1),
                             mass=0.95)
    assert drawn_elements(flat) == drawn_elements(raw)


def test_flattening_keeps_links_and_writes_well_formed_svg() -> None:
    svg = ('<svg xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink" width="10pt">'
           '<defs><path id="m1" d="M 0 0 L 1 1"/></defs><g id="xtick_1"><g><use xlink:href="#m1" x="1"/></g>'
           '<g id="text_1"><text transform="rotate(-0 1 2)" x="1">a &lt; b</text></g></g>'
           '<g id="mine" style="fill: red"><rect width="1"/></g></svg>')
    flat = flattened(svg)
    root = ET.fromstring(flat)
    assert [e.tag.split("}")[1] for e in root.iter()] == ["svg", "defs", "path", "use", "text", "g", "rect"]
    use = root.find(f"{{{SVG}}}use")
    assert use is not None and use.get("{http://www.w3.org/1999/xlink}href") == "#m1"
    text = root.find(f"{{{SVG}}}text")
    assert text is not None and text.text == "a < b" and "transform" not in text.attrib
    assert flat.startswith('<svg xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink"')
