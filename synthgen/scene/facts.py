"""Per-object facts: one table of what each fact is, its unit and its default bins.

Each annotation carries its facts under the extra COCO key ``"synthgen"``
(:func:`synthgen.scene.render_scene` computes them).  This table is their one
description: the README's facts table is rendered from it (a test holds the two
equal), and so are the default bins of ``synthgen score --by`` and the list of
facts in that option's help.  A new fact is one entry here plus the code that
computes it.

``type`` is ``numeric`` (sliced into bins), ``categorical`` (one bin per value)
or ``box`` (an xyxy box, not sliced).  ``edges`` are the default bin edges of a
numeric fact; ``base`` instead asks for powers of ``base`` spanning the values;
a numeric fact with neither gets quintile edges of the values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Fact", "FACTS", "FACTS_BY_NAME", "DEFAULT_EDGES", "GEOMETRIC_BASE", "slice_facts", "default_bins", "facts_table"]


@dataclass(frozen=True, slots=True)
class Fact:
    """One per-object fact (see the module docstring)."""

    name: str
    type: str
    unit: str
    doc: str
    edges: tuple[float, ...] | None = None
    base: float | None = None
    #: False for a value read from the COCO annotation itself rather than the ``synthgen`` key
    recorded: bool = True


FACTS: tuple[Fact, ...] = (
    Fact("kind", "categorical", "", "shape kind (also the category name)"),
    Fact("z", "numeric", "", "draw order, 0 = bottom"),
    Fact("full_box", "box", "px", "exact box: tight box of the continuous shape, clipped to the canvas, xyxy"),
    Fact("visible_box", "box", "px", "visible box: tight box of the part nothing hides, xyxy (objects only)"),
    Fact("pixel_box", "box", "px", "pixel box: tight box of the pixels with visible coverage above zero, xyxy"),
    Fact("size", "numeric", "px", "longer side of the unclipped exact box", base=2.0),
    Fact("area", "numeric", "px²", "the COCO annotation's `area` (visible area)", base=4.0, recorded=False),
    Fact("aspect", "numeric", "", "shape's own width/height ratio"),
    Fact("rotation", "numeric", "degrees", "rotation, clockwise on screen", edges=(0.0, 90.0, 180.0, 270.0, 360.0)),
    Fact(
        "visible_fraction",
        "numeric",
        "fraction",
        "visible coverage / full coverage",
        edges=(0.0, 0.25, 0.5, 0.75, 0.9, 1.0),
    ),
    Fact("truncated", "categorical", "", "cut by the canvas border"),
    Fact(
        "contrast",
        "numeric",
        "fraction",
        "luma difference between the fill and what lies under the object, 0..1",
        edges=(0.0, 0.1, 0.2, 0.4, 0.6, 1.0),
    ),
    Fact("fill", "categorical", "", "paint style: flat, gradient or stripes"),
    Fact("outline", "categorical", "", "drawn as an outline only"),
    Fact(
        "identifiable",
        "categorical",
        "",
        'whether its kind can be told from its pixels at its size (see "Shape kinds" below)',
    ),
    Fact(
        "max_iou",
        "numeric",
        "",
        "largest box IoU with another annotated object in the image (objects only)",
        edges=(0.0, 0.1, 0.3, 0.5, 0.7, 1.0),
    ),
    Fact(
        "neighbours",
        "numeric",
        "count",
        "number of annotated objects whose boxes overlap this one (objects only)",
        edges=(0.0, 1.0, 2.0, 4.0, 8.0, math.inf),
    ),
    Fact(
        "ignored",
        "categorical",
        "",
        "on ignore regions only (`iscrowd: 1`): the rule that dropped it, `min_visible` or `min_area`",
    ),
)

FACTS_BY_NAME = {f.name: f for f in FACTS}

#: Default bin edges per numeric fact (degrees for rotation, fractions otherwise).
DEFAULT_EDGES: dict[str, tuple[float, ...]] = {f.name: f.edges for f in FACTS if f.edges is not None}
#: Numeric facts binned by default at powers of this base spanning the objects' values.
GEOMETRIC_BASE: dict[str, float] = {f.name: f.base for f in FACTS if f.base is not None}


def slice_facts() -> tuple[str, ...]:
    """Names of the facts ``score --by`` can slice by (numeric and categorical ones).

    Examples
    --------
    >>> slice_facts()[:3]
    ('kind', 'z', 'size')
    """
    return tuple(f.name for f in FACTS if f.type != "box")


def default_bins(fact: Fact) -> str:
    """How ``score --by FACT`` bins a fact by default, in words.

    Examples
    --------
    >>> default_bins(FACTS_BY_NAME["neighbours"]), default_bins(FACTS_BY_NAME["size"])
    ('0, 1, 2, 4, 8, inf', 'powers of 2')
    """
    if fact.type == "box":
        return "not sliced"
    if fact.type == "categorical":
        return "one per value"
    if fact.edges is not None:
        return ", ".join(f"{e:g}" for e in fact.edges)
    if fact.base is not None:
        return f"powers of {fact.base:g}"
    return "quintiles"


def facts_table() -> str:
    """The README's facts table (Markdown), one row per fact recorded under the ``synthgen`` key."""
    rows = ["| fact | type | unit | default `--by` bins | meaning |", "|---|---|---|---|---|"]
    for f in FACTS:
        if f.recorded:
            rows.append(f"| `{f.name}` | {f.type} | {f.unit} | {default_bins(f)} | {f.doc} |")
    return "\n".join(rows) + "\n"
