"""Where objects go: placement strategies over object boxes.

A strategy receives each object's half-extents (half the width and height of
its unclipped exact box, which is centred on the object's centre) and returns
centres in image coordinates (see :mod:`synthgen.geometry`).  Strategies know
nothing about shapes or pixels, only boxes, so their guarantees (overlap
limits, target IoUs) are statements about exact boxes.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Placement", "scatter", "place"]


@dataclass(frozen=True, slots=True)
class Placement:
    """Result of a placement strategy.

    Attributes
    ----------
    centres : ndarray of shape (N, 2)
        ``(x, y)`` centre of each placed object, pixels.
    index : ndarray of shape (N,)
        Which of the requested objects each centre belongs to (a strategy may
        place fewer than requested).
    info : dict
        JSON-able facts about the placement (e.g. how many did not fit).
    """

    centres: np.ndarray
    index: np.ndarray
    info: dict = field(default_factory=dict)


def scatter(half_extents: np.ndarray, width: int, height: int, *, rng: np.random.Generator) -> Placement:
    """Independent uniform centres over the canvas; overlaps and border cuts allowed.

    Parameters
    ----------
    half_extents : ndarray of shape (N, 2)
        Half width and half height of each object's box, pixels (unused: a
        centre anywhere on the canvas keeps part of every object visible).
    width, height : int
        Canvas size, pixels.
    rng : numpy.random.Generator
    """
    n = len(half_extents)
    centres = np.empty((n, 2), dtype=np.float64)
    centres[:, 0] = rng.uniform(0.0, width, size=n)
    centres[:, 1] = rng.uniform(0.0, height, size=n)
    return Placement(centres=centres, index=np.arange(n))


def place(layout: str, half_extents: np.ndarray, width: int, height: int, spec, *, rng: np.random.Generator) -> Placement:
    """Run the placement strategy named ``layout`` (``objects.layout``)."""
    if layout == "scatter":
        return scatter(half_extents, width, height, rng=rng)
    raise ValueError(f"unknown layout {layout!r}")
