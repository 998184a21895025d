"""Figures' SVG without the elements that draw nothing, which the PDF renderer pays for one by one.

matplotlib wraps every artist in a group that carries only an automatic id (``xtick_3``, ``line2d_7``),
wraps each tick mark's ``<use>`` in a group with no attribute at all, turns every label with a
``rotate(-0 ...)`` and adds a metadata block. WeasyPrint walks, cascades and saves its state for each of
those; about half the elements of a report figure were such groups, and leaving them out made the PDF
about a tenth faster (measured on a report of 30 paged pairs). What is drawn, in what order and with
which styles, transforms and clips, is unchanged; groups with an id of ours (``highlight-rings``) stay, and
so do matplotlib's groups of whole parts (``axes_1``, ``legend_1``), since they name what tests and readers
look for.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from xml.sax.saxutils import escape, quoteattr

SVG = "http://www.w3.org/2000/svg"
XLINK = "http://www.w3.org/1999/xlink"

_GROUP = f"{{{SVG}}}g"
_METADATA = f"{{{SVG}}}metadata"
# matplotlib's ids of axis parts (a class name, "_", a counter), the bulk of the idle groups; the ids of
# larger parts (axes_1, patch_2, legend_1) are kept, as anything reading the figure may look for them
_AXIS_PART_ID = re.compile(r"(?:xtick|ytick|line2d|text|matplotlib\.axis)_\d+")
_NO_TURN = re.compile(r"rotate\(-?0 [-0-9.e ]+\)")


def _idle(element: ET.Element) -> bool:
    """A group that only groups: no attribute but perhaps the automatic id of an axis part."""
    if element.tag != _GROUP:
        return False
    attributes = set(element.attrib)
    return not attributes or (attributes == {"id"} and _AXIS_PART_ID.fullmatch(element.get("id", "")) is not None)


def _flatten_children(parent: ET.Element) -> None:
    kept: list[ET.Element] = []
    for child in list(parent):
        _flatten_children(child)
        if child.tag == _METADATA:
            continue
        if _NO_TURN.fullmatch(child.get("transform", "")):
            del child.attrib["transform"]
        if _idle(child):
            kept.extend(child)
        else:
            kept.append(child)
    parent[:] = kept


def flattened(svg: str) -> str:
    """``svg`` with idle groups replaced by their children, no-op rotations and metadata left out."""
    root = ET.fromstring(svg)
    _flatten_children(root)
    parts = [f'<svg xmlns="{SVG}" xmlns:xlink="{XLINK}"']
    _write(root, parts, opened=True)
    return "".join(parts)


def _name(qualified: str) -> str:
    """An element's or attribute's name as written: SVG's unprefixed, XLink's with ``xlink:``."""
    if qualified.startswith(f"{{{SVG}}}"):
        return qualified[len(SVG) + 2:]
    if qualified.startswith(f"{{{XLINK}}}"):
        return "xlink:" + qualified[len(XLINK) + 2:]
    return qualified


def _write(element: ET.Element, parts: list[str], opened: bool = False) -> None:
    """Serialise by hand: ElementTree's writer takes prefixes from one registry for the whole process,
    which other libraries rewrite (the PDF renderer does), so its output could change with what ran before."""
    if not opened:
        parts.append(f"<{_name(element.tag)}")
    parts.extend(f" {_name(key)}={quoteattr(value)}" for key, value in element.attrib.items())
    if not len(element) and not element.text:
        parts.append("/>")
    else:
        parts.append(">" + escape(element.text or ""))
        for child in element:
            _write(child, parts)
            parts.append(escape(child.tail or ""))
        parts.append(f"</{_name(element.tag)}>")
